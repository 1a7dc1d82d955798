"""The report and figures: built from a small real run, checked without a browser.

The run goes through explore and write_study on an invented survey; the
tables other parts of pathfinder will add (stability, subsets, sites, ...)
are invented with their documented columns (see tests/report/__init__.py).
The browser checks (every chart draws, nothing is fetched) live in
test_browser.py.
"""

from __future__ import annotations

import html
import io
import re
import struct
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import altair as alt
import numpy as np
import pandas as pd
import pytest

from pathfinder.errors import InputError
from pathfinder.report import charts, theme, vendor
from pathfinder.report.html import (
    CSP,
    NOT_IN_RUN,
    read_record,
    read_tables,
    write_figures,
    write_report,
)

from . import (
    LATER_TABLES,
    add_invented_tables,
    invented_tables,
    large_tables,
    remove_later_tables,
    small_run,
)

SECTION_TITLES = ["At a glance", "1 Data", "2 Correlated predictors", "3 Coefficient paths", "4 Cross-validation",
                  "5 Stability", "6 Shrinkage against subsets", "7 The chosen model", "8 Space",
                  "9 Methods for a paper", "10 Run record", "11 Cautions"]
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
MB = 1024 * 1024


# ---- fixtures -------------------------------------------------------------------------

@pytest.fixture(scope="module")
def run_folder(tmp_path_factory) -> Path:
    """A small real run without the later stages: coefficient paths, CV, nested comparison."""
    folder = small_run(tmp_path_factory.mktemp("report") / "run")
    remove_later_tables(folder)
    return folder


@pytest.fixture(scope="module")
def full_folder(tmp_path_factory) -> Path:
    """A small real run with every stage; tables a stage does not write yet are invented."""
    folder = small_run(tmp_path_factory.mktemp("report_full") / "run")
    add_invented_tables(folder)
    return folder


@pytest.fixture(scope="module")
def report(run_folder) -> str:
    return write_report(run_folder).read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def full_report(full_folder) -> str:
    return write_report(full_folder).read_text(encoding="utf-8")


# ---- reading the page -------------------------------------------------------------------

class Page(HTMLParser):
    """Headings, guide lines, every tag with its attributes, and the text of each script."""

    def __init__(self, text: str):
        super().__init__(convert_charrefs=True)
        self.tags, self.scripts, self.h2, self.guides = [], [], [], []
        self._script, self._h2, self._guide = None, None, None
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append((tag, attrs))
        if tag == "script":
            self._script = [attrs, []]
        elif tag == "h2":
            self._h2 = []
        elif tag == "p" and "guide" in (attrs.get("class") or "").split():
            self._guide = []

    def handle_endtag(self, tag):
        if tag == "script" and self._script is not None:
            self.scripts.append((self._script[0], "".join(self._script[1])))
            self._script = None
        elif tag == "h2" and self._h2 is not None:
            self.h2.append("".join(self._h2).strip())
            self._h2 = None
        elif tag == "p" and self._guide is not None:
            self.guides.append("".join(self._guide).strip())
            self._guide = None

    def handle_data(self, data):
        for part in (self._script[1] if self._script else None, self._h2, self._guide):
            if part is not None:
                part.append(data)


# A web address used as something to load: an attribute, a CSS url() or @import, or a
# script call that fetches, imports or opens it.
LOAD_TARGET = re.compile(
    r"""(?:\b(?:src|href|srcset|action|poster|data)\s*=\s*|url\(\s*|@import\s+|\bfetch\(\s*|\bimport\(\s*|"""
    r"""\bfrom\s+|\.open\(\s*["'][A-Z]+["']\s*,\s*|\bnew\s+(?:WebSocket|EventSource|Worker)\(\s*)"""
    r"""["'`]?\s*(?:https?:)?//""", re.IGNORECASE)


# ---- the report ---------------------------------------------------------------------------

def test_every_section_has_its_heading_and_a_guide(report):
    page = Page(report)
    assert page.h2 == SECTION_TITLES
    assert len(page.guides) == len(SECTION_TITLES)
    assert all(len(g) > 20 and "\n" not in g for g in page.guides)


def test_data_section_reads_the_run_record(report, run_folder):
    record = read_record(run_folder)
    data = report.split('<section id="data">')[1].split("</section>")[0]
    assert f"{record['rows']['used']} of {record['rows']['read']} rows used" in data
    assert "rock=granite" in data and "categorical" in data      # the factor and the terms made from it
    assert record["response"]["column"] in data


def test_tables_of_later_stages_say_not_part_of_this_run(report):
    for table in ("stability.csv", "stability_path.csv", "subsets.csv", "importance.csv", "vif.csv",
                  "sites.csv", "chosen.csv", "response_curves.csv"):
        assert re.search(rf"\({re.escape(table)}\): {NOT_IN_RUN}\.", report), table
    assert len(re.findall(NOT_IN_RUN, report)) == 8
    assert "could not be drawn" not in report


def test_every_table_present_gives_charts_and_no_absence_line(full_report):
    assert NOT_IN_RUN not in full_report
    assert "could not be drawn" not in full_report
    names = re.findall(r'<div class="chart" id="chart-([^"]+)"', full_report)
    for expected in ("correlations", "vif", "paths_lasso", "paths_elastic_net_mix_0_5", "cross_validation",
                     "stability", "stability_paths", "comparison", "akaike_weights", "importance",
                     "chosen", "response_curves", "sites_by_fold", "sites_by_residual"):
        assert expected in names
    assert "PFER" in full_report and re.search(r"threshold \d+% of subsamples", full_report)


def html_tables(text: str) -> list:
    """(header, rows) of every <table> in the page, cells as plain text."""
    def plain(cell):
        return html.unescape(re.sub(r"<[^>]+>", "", cell)).strip()
    out = []
    for table in re.findall(r"<table[^>]*>(.*?)</table>", text, re.S):
        header = [plain(h) for h in re.findall(r"<th>(.*?)</th>", table, re.S)]
        rows = [[plain(c) for c in re.findall(r"<td>(.*?)</td>", row, re.S)]
                for row in re.findall(r"<tr>(.*?)</tr>", table, re.S)]
        out.append((header, [r for r in rows if r]))
    return out


def test_comparison_and_chosen_model_are_plain_tables(full_report, full_folder):
    comparison = pd.read_csv(full_folder / "comparison.csv")
    tables = html_tables(full_report)
    header, rows = next(t for t in tables if "outer-fold error (± SE)" in t[0])
    assert len(rows) == len(comparison)
    first = comparison.iloc[0]
    cell = rows[0][header.index("outer-fold error (± SE)")]
    assert cell == f"{first.outer_mean:.4g} ± {first.outer_se:.3g}"
    header, rows = next(t for t in tables if "coefficient (units of the term)" in t[0])
    chosen = pd.read_csv(full_folder / "chosen.csv")
    assert [r[0] for r in rows] == list(chosen["term"])
    assert [float(r[1]) for r in rows] == pytest.approx(list(chosen["estimate"]), rel=1e-3)


def test_cautions_say_the_four_things(report):
    cautions = report.split('<section id="cautions">')[1].split("</section>")[0].lower()
    for idea in (
        "not evidence that it causes",
        "outside the range that was sampled",
        "stand-in for an unmeasured",
        "local regulation, expert review and licensed",
    ):
        assert idea in cautions


def test_nothing_is_loaded_from_a_network_address(full_report):
    page = Page(full_report)
    for tag, attrs in page.tags:
        for name in ("src", "href", "srcset", "action", "data", "poster"):
            value = (attrs.get(name) or "").strip().lower()
            assert not value.startswith(("http:", "https:", "//")), (tag, name, value)
        assert tag not in ("link", "iframe", "img", "object", "embed", "base"), tag
    scripts = [text for attrs, text in page.scripts]
    assert len(scripts) >= 3 and all(not attrs.get("src") for attrs, _ in page.scripts)
    for text in scripts:
        assert not LOAD_TARGET.search(text), LOAD_TARGET.search(text).group(0)
        # the only addresses written anywhere are the inert ones the vendor module lists
        assert all(vendor.is_inert(a) for a in vendor.addresses(text)), [
            a for a in vendor.addresses(text) if not vendor.is_inert(a)
        ]
    styles = re.findall(r"<style[^>]*>(.*?)</style>", full_report, re.S)
    assert styles and not any("url(" in s or "@import" in s or "@font-face" in s for s in styles)
    policy = next(
        a["content"] for t, a in page.tags if t == "meta" and a.get("http-equiv") == "Content-Security-Policy"
    )
    assert policy == CSP and "default-src 'none'" in policy and "connect-src 'none'" in policy


def test_the_load_target_check_catches_a_planted_address():
    # the pattern above must not be toothless: each of these would fetch something
    for planted in (
        '<img src="https://example.org/a.png">',
        "fetch('https://example.org/x')",
        'import("https://example.org/m.js")',
        "@import url(http://example.org/s.css)",
        'xhr.open("GET", "http://example.org/d.json")',
        "s.src='//example.org/x.js'",
    ):
        assert LOAD_TARGET.search(planted), planted


def test_report_size_is_sane(run_folder, report):
    size = (run_folder / "report.html").stat().st_size
    bundle = len(vendor.javascript_bundle().encode())
    assert bundle < size < 5 * MB


def test_report_is_as_readable_as_the_tables_beside_it(run_folder, report):
    # written through a temporary file, yet with the permissions every other output file gets
    mode = (run_folder / "report.html").stat().st_mode & 0o777
    assert mode == (run_folder / "coefficients.csv").stat().st_mode & 0o777
    assert not list(run_folder.glob(".report.html.*"))          # no temporary file left behind


def test_a_large_run_stays_under_five_megabytes(tmp_path):
    # 10,000 sites and 200 terms, five methods of 100 penalties each (invented tables)
    tables, record = large_tables(n_sites=10_000, n_terms=200)
    path = write_report(tmp_path, tables, record)
    text = path.read_text(encoding="utf-8")
    assert path.stat().st_size < 5 * MB
    assert "could not be drawn" not in text
    assert "a random 5,000 of 10,000 shown" in text  # the map says it was thinned


def test_report_from_a_folder_with_almost_nothing(tmp_path):
    pd.DataFrame({"term_a": ["a"], "term_b": ["b"], "r": [0.2]}).to_csv(
        tmp_path / "correlations.csv", index=False
    )
    text = write_report(tmp_path).read_text(encoding="utf-8")
    assert Page(text).h2 == SECTION_TITLES
    assert f"The run record (run.json): {NOT_IN_RUN}." in text
    assert 'id="chart-correlations"' in text


def test_a_table_with_wrong_columns_gives_one_line_not_a_crash(tmp_path, run_folder):
    tables = read_tables(run_folder)
    tables["comparison"] = tables["comparison"].drop(columns=["outer_se"])
    text = write_report(tmp_path, tables, read_record(run_folder)).read_text(encoding="utf-8")
    line = re.search(r"could not be drawn: ([^<]*)", text).group(1)
    assert "comparison" in line and "outer_se" in line


# ---- the chart functions -------------------------------------------------------------------


def all_charts(folder: Path, source: str) -> dict:
    """Every chart function on the run's tables; the later tables from the run itself
    (``source="run"``, where it wrote them) or invented with the documented columns."""
    tables = read_tables(folder)
    extra = invented_tables(folder)
    if source == "run":
        extra.update({name: tables[name] for name in LATER_TABLES if name in tables})
    coords = {"x_title": "east", "y_title": "north"}
    return {
        "coefficient_paths": charts.coefficient_paths(tables["coefficients"], tables["picks"]),
        "coefficient_paths_by_terms": charts.coefficient_paths(
            tables["coefficients"],
            tables["picks"],
            x="n_terms",
            method="lasso",
        ),
        "cv_curve": charts.cv_curve(tables["cv"], tables["picks"]),
        "cv_curve_auc": charts.cv_curve(tables["cv"], tables["picks"], metric="auc"),
        "comparison_chart": charts.comparison_chart(tables["comparison"]),
        "correlation_heatmap": charts.correlation_heatmap(tables["correlations"]),
        "stability_bars": charts.stability_bars(extra["stability"], threshold=0.7),
        "stability_paths": charts.stability_paths(extra["stability_path"], threshold=0.7),
        "akaike_weights": charts.akaike_weights(extra["subsets"]),
        "importance_bars": charts.importance_bars(extra["importance"]),
        "vif_bars": charts.vif_bars(extra["vif"]),
        "chosen_coefficients": charts.chosen_coefficients(extra["chosen"]),
        "response_curves": charts.response_curves(extra["response_curves"], extra["rug"]),
        "site_map_fold": charts.site_map(extra["sites"], colour="fold", **coords),
        "site_map_residual": charts.site_map(extra["sites"], colour="held_out", **coords),
    }


@pytest.mark.parametrize("source", ["run", "invented"])
def test_every_chart_function_returns_a_valid_chart(full_folder, source):
    for name, chart in all_charts(full_folder, source).items():
        assert isinstance(chart, alt.TopLevelMixin), name
        spec = chart.to_dict(validate=True)  # raises when the spec breaks the Vega-Lite schema
        assert spec["$schema"].endswith(f"v{alt.SCHEMA_VERSION.lstrip('v')}.json"), name


@pytest.mark.parametrize("source", ["run", "invented"])
def test_every_chart_compiles_to_vega(full_folder, source):
    import vl_convert

    # the Vega-Lite compiler catches what the schema cannot (unknown signals, lost datasets)
    for name, chart in all_charts(full_folder, source).items():
        vega = vl_convert.vegalite_to_vega(chart.to_dict(), vl_version=vendor.vegalite_version())
        assert vega["marks"], name


def inline_frame(spec: dict, columns: set) -> pd.DataFrame:
    """The inline CSV dataset of a spec that has ``columns``."""
    for text in spec.get("datasets", {}).values():
        if isinstance(text, str):
            frame = pd.read_csv(io.StringIO(text))
            if columns <= set(frame.columns):
                return frame
    raise AssertionError(f"no dataset with {columns}")


def test_coefficient_paths_are_thinned_and_keep_the_picks(run_folder):
    tables = read_tables(run_folder)
    coef, picks = tables["coefficients"], tables["picks"]
    lasso = coef[coef["method"] == "lasso"]
    # stretch the path to 300 penalties by repeating steps (a picture test, not a fit)
    long = pd.concat(
        [lasso.assign(step=lasso["step"] + i * 1000, penalty=lasso["penalty"] * 0.5**i) for i in range(20)],
        ignore_index=True,
    )
    assert long["step"].nunique() > 300
    long_picks = picks[picks["method"] == "lasso"].assign(step=lambda p: p["step"] + 7000)
    spec = charts.coefficient_paths(long, long_picks, max_steps=100).to_dict()
    steps = inline_frame(spec, {"k", "x", "penalty", "n_terms"})
    assert len(steps) <= 102
    for step in long_picks["step"]:
        penalty = long.loc[long["step"] == step, "penalty"].iloc[0]
        assert np.isclose(steps["penalty"], penalty, rtol=1e-4).any(), step


def test_site_map_samples_large_tables_and_says_so():
    rng = np.random.default_rng(2)
    sites = pd.DataFrame(
        {"x": rng.uniform(0, 1, 12_000), "y": rng.uniform(0, 1, 12_000), "fold": rng.integers(1, 6, 12_000)}
    )
    spec = charts.site_map(sites, max_points=5_000, seed=4).to_dict()
    points = inline_frame(spec, {"x", "y", "fold_name"})
    assert len(points) == 5_000
    assert "a random 5,000 of 12,000 shown (seed 4)" in str(spec["title"])
    again = inline_frame(charts.site_map(sites, max_points=5_000, seed=4).to_dict(), {"x", "y"})
    assert points.equals(again)  # the seed fixes the sample


def test_cluster_order_puts_correlated_terms_side_by_side():
    # two tight groups of three, weak links between: the order keeps each group together
    groups = {"a1": 0, "a2": 0, "a3": 0, "b1": 1, "b2": 1, "b3": 1}
    names = ["a1", "b1", "a2", "b2", "a3", "b3"]
    rows = [
        (x, y, 0.9 if groups[x] == groups[y] else 0.05) for i, x in enumerate(names) for y in names[i + 1 :]
    ]
    order = charts.cluster_order(pd.DataFrame(rows, columns=["term_a", "term_b", "r"]))
    labels = [groups[t] for t in order]
    assert labels in ([0, 0, 0, 1, 1, 1], [1, 1, 1, 0, 0, 0])


def test_bad_tables_give_one_clear_line():
    with pytest.raises(InputError) as error:
        charts.coefficient_paths(pd.DataFrame({"term": ["a"], "estimate": [1.0]}))
    message = str(error.value)
    assert "\n" not in message and "coefficients" in message and "penalty" in message
    with pytest.raises(InputError, match="n_terms"):
        charts.coefficient_paths(
            pd.DataFrame(columns=["method", "mix", "step", "penalty", "term", "estimate", "estimate_std"]),
            x="share",
        )
    with pytest.raises(InputError, match="fold"):
        charts.site_map(pd.DataFrame({"x": [1.0], "y": [2.0]}), colour="fold")
    with pytest.raises(InputError, match="DataFrame"):
        charts.vif_bars([("a", 2.0)])


# ---- figures ---------------------------------------------------------------------------------

FIGURE_TABLES = ("correlations", "coefficients", "picks", "path", "cv", "comparison", "stability", "sites")


@pytest.fixture(scope="module")
def figure_folder(tmp_path_factory, full_folder):
    """Figures of a few tables of the full run (fewer charts keep the exports quick)."""
    tables = {k: v for k, v in read_tables(full_folder).items() if k in FIGURE_TABLES}
    record = read_record(full_folder)
    folder = tmp_path_factory.mktemp("figures")
    return folder, tables, record


def png_size(data: bytes) -> tuple:
    return struct.unpack(">II", data[16:24])


def test_png_figures_are_png_at_print_resolution(figure_folder):
    folder, tables, record = figure_folder
    paths = write_figures(folder, fmt="png", tables=tables, record=record)
    names = {p.stem for p in paths}
    assert {
        "correlations",
        "paths_lasso",
        "cross_validation",
        "comparison",
        "stability",
        "sites_by_fold",
    } <= names
    assert all(p.parent == folder / "figures" for p in paths)
    svgs = {p.stem: p for p in write_figures(folder, fmt="svg", tables=tables, record=record)}
    for path in paths:
        data = path.read_bytes()
        assert data.startswith(PNG_SIGNATURE), path.name
        width, _ = png_size(data)
        svg_width = float(ET.parse(svgs[path.stem]).getroot().get("width"))
        assert abs(width - 3 * svg_width) <= 3, (path.name, width, svg_width)  # scale 3
        # the file states its resolution: 216 pixels per inch = 8504 per metre
        at = data.find(b"pHYs")
        assert at > 0 and struct.unpack(">II", data[at + 4 : at + 12]) == (8504, 8504)


def test_svg_figures_parse_as_svg(figure_folder):
    folder, tables, record = figure_folder
    paths = write_figures(folder, fmt="svg", tables=tables, record=record)
    assert paths
    for path in paths:
        root = ET.parse(path).getroot()
        assert root.tag == "{http://www.w3.org/2000/svg}svg", path.name
        assert "http" not in "".join(root.itertext()).replace("www.w3.org", "")


def test_figures_refuse_an_unknown_format(figure_folder):
    folder, tables, record = figure_folder
    with pytest.raises(InputError, match="png"):
        write_figures(folder, fmt="gif", tables=tables, record=record)


# ---- the palette --------------------------------------------------------------------------------


def test_machado_matrices_keep_greys_grey():
    # each row of the Machado, Oliveira & Fernandes (2009) matrices sums to 1, so a neutral grey is
    # seen unchanged: a check that the numbers were copied correctly
    for vision, matrix in theme.DICHROMACY.items():
        assert np.allclose(matrix.sum(axis=1), 1.0, atol=2e-3), vision
        assert np.allclose(theme.as_seen("#808080", vision), theme.as_seen("#808080"), atol=0.5)


@pytest.mark.parametrize("vision", ["typical", "deuteranopia", "protanopia", "tritanopia"])
def test_palette_stays_distinct_for_colour_blind_viewers(vision):
    colours = list(theme.CATEGORICAL) + [theme.STONE]
    assert theme.smallest_distance(colours, vision) >= theme.MIN_DISTANCE


def test_the_distance_check_rejects_a_red_green_pair():
    # a plain red and green of equal lightness: far apart for typical vision, close with
    # deuteranopia (the classic confusion): the check must see the difference
    red, green = "#C0392B", "#4E8F2F"
    assert theme.smallest_distance([red, green]) > 40
    assert theme.smallest_distance([red, green], "deuteranopia") < theme.MIN_DISTANCE


def test_signed_ramps_run_blue_to_ochre_for_every_viewer():
    for vision in ("typical", "deuteranopia", "protanopia", "tritanopia"):
        assert theme.smallest_distance([theme.DIVERGING[0], theme.DIVERGING[-1]], vision) > 40


def test_theme_is_registered_under_our_name():
    assert theme.THEME_NAME in alt.theme.names()
    config = theme.config()
    assert config["range"]["category"] == list(theme.CATEGORICAL)
    assert "http" not in str(config)


def test_optimism_is_described_as_the_code_computes_it(full_report, full_folder):
    """comparison.csv's optimism is outer minus inner error (choose/nested.py); the note must
    say that, and say which sign means flattered (a check of our own wording)."""
    comparison = pd.read_csv(full_folder / "comparison.csv")
    mine = comparison.dropna(subset=["optimism"]).iloc[0]
    outer = pd.read_csv(full_folder / "outer_folds.csv")
    rows = outer[(outer.method == mine.method) & (outer.rule == mine.rule)]
    assert mine.optimism == pytest.approx((rows.outer_score - rows.inner_score).mean(), rel=1e-6)
    text = " ".join(full_report.split('<section id="compare">')[1].split("</section>")[0].split())
    assert "outer-fold error minus the inner (cross-validated) error" in text
    assert "a positive value means the inner folds flattered the choice" in text


def test_the_stability_bound_keeps_its_condition(full_report):
    """Meinshausen & Buhlmann (2010, Theorem 1): the bound holds for terms selected with
    probability at most q/p; the report must keep that condition beside the number."""
    text = " ".join(full_report.split('<section id="stability">')[1].split("</section>")[0].split())
    assert "PFER" in text and "at most q/p" in text
