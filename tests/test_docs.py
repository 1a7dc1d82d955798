"""The documentation: the site builds without a warning, and every Python example runs.

Every fenced ``python`` block of README.md and of the pages in docs/ is run,
page by page, in one namespace per page and in a fresh working folder, on
the demo survey. Blocks marked ``console`` (shell commands) are shown, not run.
The README's example names a few things it does not make (``X``, ``y``,
``X_new``, ``sites.csv`` with a ``present`` and a ``site_id`` column,
``results/model.json``, ``new_sites``): the test makes them from the demo
survey first (a part of it, so the example runs quickly), and the example
then runs as written.
"""

import re
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

import pathfinder
from pathfinder.examples import DEMO_RESPONSES, load_demo

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
PAGES = sorted(DOCS.rglob("*.md"))
FENCE = re.compile(r"^```(\w*)[^\n]*\n(.*?)^```", re.MULTILINE | re.DOTALL)


def python_blocks(path: Path) -> list[str]:
    return [body for lang, body in FENCE.findall(path.read_text(encoding="utf-8")) if lang == "python"]


def test_the_site_builds_without_warnings(tmp_path):
    result = subprocess.run(
        [sys.executable, "-m", "sphinx", "-W", "--keep-going", "-q", "-b", "html", str(DOCS),
         str(tmp_path / "html")], capture_output=True, text=True, timeout=600)
    assert result.returncode == 0, result.stdout + result.stderr
    for page in PAGES:
        name = page.relative_to(DOCS).with_suffix(".html")
        assert (tmp_path / "html" / name).is_file(), name
    api = (tmp_path / "html" / "api.html").read_text(encoding="utf-8")
    # the reference is made from the docstrings
    assert "Fit a lasso / elastic-net / ridge path" in api
    assert "PenalisedPathClassifier" in api
    assert "http://" not in api.replace("http://www.w3.org", "")   # nothing fetched from the web


def test_every_page_is_in_the_table_of_contents():
    index = (DOCS / "index.md").read_text(encoding="utf-8")
    for page in PAGES:
        name = page.relative_to(DOCS).with_suffix("").as_posix()
        assert name == "index" or name in index, name


def run_blocks(blocks, namespace, where: Path, monkeypatch):
    monkeypatch.chdir(where)
    for i, block in enumerate(blocks):
        try:
            exec(compile(block, f"<block {i + 1}>", "exec"), namespace)
        except Exception as error:      # name the block that failed, with its text
            raise AssertionError(f"block {i + 1} failed: {error!r}\n{block}") from error


@pytest.mark.parametrize("page", [p for p in PAGES if python_blocks(p)],
                         ids=lambda p: p.relative_to(DOCS).as_posix())
def test_documentation_examples_run(page, tmp_path, monkeypatch):
    run_blocks(python_blocks(page), {"__name__": "__docs__"}, tmp_path, monkeypatch)


def test_the_pages_that_teach_have_examples():
    for name in ("getting-started", "how-to/presence-absence", "how-to/counts-with-effort",
                 "how-to/continuous", "python-tools"):
        assert python_blocks(DOCS / f"{name}.md"), name


def readme_inputs(folder: Path) -> dict:
    """What the README's Python example refers to, made from the demo survey."""
    demo = load_demo()
    columns = ["site", DEMO_RESPONSES["binomial"], "elevation_m", "soil_ph", "wetness_index",
               "july_temp_c", "soil_phosphate_mg_l", "distance_to_stream_m", "bedrock"]
    sites = demo[columns].iloc[:240].rename(columns={"site": "site_id",
                                                     DEMO_RESPONSES["binomial"]: "present"})
    sites.to_csv(folder / "sites.csv", index=False)
    numeric = ["elevation_m", "soil_ph", "wetness_index", "july_temp_c"]
    study = pathfinder.explore(sites, response="present", exclude=["site_id"], folds=4,
                               nested=False, stability=False, subsets=False, mixes=(1.0,))
    from pathfinder.outputs.write import write_study
    write_study(study, folder / "results")
    return {"X": demo[numeric].iloc[:240], "y": demo[DEMO_RESPONSES["binomial"]].iloc[:240],
            "X_new": demo[numeric].iloc[240:260], "new_sites": demo.iloc[240:260]}


def test_readme_examples_run(tmp_path, monkeypatch):
    blocks = python_blocks(ROOT / "README.md")
    assert blocks, "the README has a Python example"
    namespace = {"__name__": "__readme__", **readme_inputs(tmp_path)}
    run_blocks(blocks, namespace, tmp_path, monkeypatch)
    assert isinstance(namespace["study"].tables["comparison"], pd.DataFrame)


def test_every_output_file_and_column_is_documented(tmp_path):
    # A run with every stage, on part of the demo survey, small settings.
    demo = load_demo().iloc[:300]
    predictors = ["elevation_m", "soil_ph", "wetness_index", "july_temp_c", "farmland_pct",
                  "bedrock"]
    study = pathfinder.explore(demo, response=DEMO_RESPONSES["binomial"], predictors=predictors,
                               coords=("x_km", "y_km"), block_size=25.0, folds=4, inner_folds=3,
                               grid_per_decade=6, n_pairs=4, nested_pairs=3, mixes=(1.0, 0.5))
    from pathfinder.outputs.write import write_study
    folder = write_study(study, tmp_path / "out")
    text = (DOCS / "outputs.md").read_text(encoding="utf-8")
    undocumented = []
    for path in sorted(folder.iterdir()):
        if f"`{path.name}`" not in text:
            undocumented.append(path.name)
        if path.suffix == ".csv":
            for column in pd.read_csv(path, nrows=0).columns:
                if f"`{column}`" not in text:
                    undocumented.append(f"{path.name}: {column}")
    assert not undocumented, f"not described in docs/outputs.md: {undocumented}"
