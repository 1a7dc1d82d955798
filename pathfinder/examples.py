"""The bundled demo scenario: the invented Carrow bell-moss survey.

The scenario lives at the top of the repository, in ``data_examples/``
(its seeded generator, the table and the truth file); an installed copy of
pathfinder carries that folder as the subpackage ``pathfinder._demo``. This
module finds it either way (installed, or running from a source checkout, where
the folder sits beside the package) and re-exports its loaders and names.
"""

from __future__ import annotations

import importlib.util
import sys
from contextlib import contextmanager
from importlib.resources import as_file, files
from pathlib import Path


def _scenario():
    try:
        from . import _demo  # installed package
        return _demo
    except ImportError:
        folder = Path(__file__).resolve().parents[1] / "data_examples"   # source checkout
        spec = importlib.util.spec_from_file_location(
            "pathfinder._demo", folder / "__init__.py", submodule_search_locations=[str(folder)])
        module = importlib.util.module_from_spec(spec)
        sys.modules["pathfinder._demo"] = module
        spec.loader.exec_module(module)
        return module


_demo = _scenario()
scenario = _demo   # the data_examples package itself (its docstring describes the survey)

DEMO_CSV = _demo.DEMO_CSV
TRUTH_JSON = _demo.TRUTH_JSON
DEMO_RESPONSES = _demo.DEMO_RESPONSES
EFFORT = _demo.EFFORT
COORDS = _demo.COORDS
GROUPS = _demo.GROUPS
SITE_LABELS = _demo.SITE_LABELS
CATEGORICAL = _demo.CATEGORICAL
load_demo = _demo.load_demo
load_truth = _demo.load_truth


def generator():
    """The seeded generator module of the scenario (``make_survey(seed)``)."""
    from importlib import import_module
    return import_module("pathfinder._demo.generate")


@contextmanager
def table_file():
    """A real file path of the bundled survey table, for as long as the block runs."""
    with as_file(files(_demo) / DEMO_CSV) as path:
        yield Path(path)
