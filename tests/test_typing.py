"""The typed public API: every public name annotated, and a type checker (mypy) agrees.

mypy (the reference type checker of the Python typing specification) checks
code written against pathfinder as a user would write it, and the modules
that hold the scikit-learn estimators and the notebook summaries. The rest of
the package is read by mypy for its types (``--follow-imports=silent``); the
errors mypy still finds in those modules are not part of this check.
"""

import inspect
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

import pathfinder

ROOT = Path(__file__).resolve().parents[1]
CHECKED_MODULES = ["pathfinder/__init__.py", "pathfinder/estimators.py", "pathfinder/report/notebook.py"]


def public_callables():
    for name in pathfinder.__all__:
        thing = getattr(pathfinder, name)
        if inspect.isfunction(thing):
            yield name, thing
        elif inspect.isclass(thing):
            for attr, member in vars(thing).items():
                if attr.startswith("_") and attr != "__init__":
                    continue
                if isinstance(member, property):
                    member = member.fget
                if inspect.isfunction(member) and member.__module__.startswith("pathfinder") \
                        and not getattr(member, "__qualname__", "").startswith("__create_fn__"):
                    yield f"{name}.{attr}", member


def missing_annotations(function):
    signature = inspect.signature(function)
    missing = [p.name for p in signature.parameters.values()
               if p.name not in ("self", "cls") and p.annotation is inspect.Parameter.empty]
    if signature.return_annotation is inspect.Signature.empty and function.__name__ != "__init__":
        missing.append("return")
    return missing


def test_every_public_function_and_method_is_annotated():
    unannotated = {name: missing_annotations(f) for name, f in public_callables()}
    unannotated = {name: m for name, m in unannotated.items() if m}
    assert not unannotated, f"public names without type hints: {unannotated}"
    checked = dict(public_callables())
    assert {"fit_path", "explore", "load_model", "PenalisedPathClassifier.fit",
            "PathResult.predict"} <= set(checked)


def test_the_package_says_it_is_typed():
    assert (ROOT / "pathfinder" / "py.typed").is_file()
    assert '"pathfinder" = ["py.typed"]' in (ROOT / "pyproject.toml").read_text(encoding="utf-8")


USER_CODE = '''
    import numpy as np
    import pandas as pd
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import StandardScaler

    import pathfinder

    X = np.zeros((10, 2))
    y = np.zeros(10)
    fit: pathfinder.PathResult = pathfinder.fit_path(X, y, family="binomial", mix=0.5)
    coef: np.ndarray = fit.coef
    table: pd.DataFrame = fit.to_frame()
    b0, b = fit.coefficients_at(0.01)
    intercept: float = b0
    probabilities: np.ndarray = fit.predict(X, penalty=0.01)
    model = pathfinder.PenalisedPathClassifier(mix=0.75, rule="min", folds=5)
    pipe = Pipeline([("scale", StandardScaler()), ("model", model)])
    fitted: pathfinder.PenalisedPathClassifier = model.fit(X, y)
    chance: np.ndarray = fitted.predict_proba(X)
    counts = pathfinder.PenalisedPathRegressor(family="poisson").fit(X, y, offset=np.zeros(10))
    study: pathfinder.Study = pathfinder.explore("sites.csv", response="present")
    frames: dict = study.tables
    options = pathfinder.StudyOptions(response="present", folds=5)
    loaded = pathfinder.load_model("results/model.json")
    predicted: pd.DataFrame = pathfinder.predict_table("model.json", "sites.csv")
'''

WRONG_CODE = '''
    import numpy as np
    import pathfinder

    fit = pathfinder.fit_path(np.zeros((3, 2)), np.zeros(3), mix="lasso")
    size: str = fit.coefficients_at(0.1)
'''


def run_mypy(tmp_path, code):
    if shutil.which("mypy") is None and subprocess.run([sys.executable, "-m", "mypy", "--version"],
                                                       capture_output=True).returncode != 0:
        pytest.fail("mypy is not installed: it is part of the test extra (pip install '.[test]')")
    user = tmp_path / "user_code.py"
    user.write_text(textwrap.dedent(code), encoding="utf-8")
    env = dict(os.environ, MYPYPATH=str(ROOT))
    result = subprocess.run(
        [sys.executable, "-m", "mypy", "--follow-imports=silent", "--ignore-missing-imports",
         "--check-untyped-defs", "--no-error-summary", "--cache-dir", str(tmp_path / "cache"),
         str(user), *CHECKED_MODULES],
        cwd=ROOT, env=env, capture_output=True, text=True, timeout=600)
    return result.returncode, result.stdout + result.stderr


@pytest.fixture(scope="module")
def typing_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("typing")


def test_mypy_accepts_user_code_and_the_new_modules(typing_dir):
    status, output = run_mypy(typing_dir, USER_CODE)
    assert status == 0, output


def test_mypy_catches_a_wrong_call(typing_dir):
    # the check can fail: a word where fit_path takes a number, a tuple read as text
    status, output = run_mypy(typing_dir, WRONG_CODE)
    assert status == 1
    assert 'Argument "mix" to "fit_path" has incompatible type "str"' in output
    assert "user_code.py:6" in output
