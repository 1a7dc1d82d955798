"""The shape of the package: families known in one place, layers that only import down.

These are checks of our own design rules (DEVELOPERS.md), read from the
source with Python's ``ast`` and ``tokenize`` modules; nothing is imported.
"""

import ast
from pathlib import Path

import pytest

from pathfinder import defaults
from pathfinder.core.families import FAMILIES

PACKAGE = Path(__file__).resolve().parents[1] / "pathfinder"
FAMILY_MODULE = PACKAGE / "core" / "families.py"

# Which rooms a room may import from (itself always). Top-level modules not
# listed here (study, cli, predict, screen, ...) sit above every room.
ALLOWED = {
    "defaults": set(),
    "errors": set(),
    "core": {"errors", "defaults"},
    "data": {"errors", "defaults", "core"},
    "diagnostics": {"errors", "defaults", "core", "data"},
    "choose": {"errors", "defaults", "core", "data", "diagnostics"},
    "outputs": {"errors", "defaults", "core", "data", "diagnostics", "choose", "report"},
    "report": {"errors", "defaults"},
}


def modules():
    return sorted(p for p in PACKAGE.rglob("*.py"))


def room_of(path: Path) -> str:
    parts = path.relative_to(PACKAGE).parts
    return parts[0] if len(parts) > 1 else parts[0][:-3]


def imported_rooms(path: Path):
    """The rooms of pathfinder a module imports (relative and absolute imports)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package_parts = path.relative_to(PACKAGE).parts[:-1]
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = list(package_parts[:len(package_parts) - node.level + 1])
                target = base + (node.module.split(".") if node.module else [])
                if not target:      # "from . import x" at the top of the package
                    target = [alias.name for alias in node.names]
                    for name in target:
                        yield name
                    continue
                yield target[0]
            elif node.module and node.module.split(".")[0] == "pathfinder":
                rest = node.module.split(".")[1:]
                if rest:
                    yield rest[0]
        elif isinstance(node, ast.Import):
            for alias in node.names:
                parts = alias.name.split(".")
                if parts[0] == "pathfinder" and len(parts) > 1:
                    yield parts[1]


def family_names_branched_on(source: str):
    """Family names a module compares with, tests membership of, or keys a table by.

    A name in a comparison (``family == "binomial"``, ``family in ("gaussian",
    ...)``), as a dictionary key or a subscript is a branch on the name; a
    default argument (``family="gaussian"``) or a word in a message is not.
    """
    def names_in(node):
        for sub in ast.walk(node):
            if isinstance(sub, ast.Constant) and isinstance(sub.value, str) \
                    and sub.value.lower() in FAMILIES:
                yield sub.lineno, sub.value

    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Compare):
            yield from names_in(node)
        elif isinstance(node, ast.Dict):
            for key in node.keys:
                if key is not None:
                    yield from names_in(key)
        elif isinstance(node, ast.Subscript):
            yield from names_in(node.slice)
        elif isinstance(node, ast.match_case):
            yield from names_in(node.pattern)


def test_no_module_outside_the_family_module_branches_on_a_family_name():
    """Families are asked, never compared by name (DEVELOPERS.md, 'Families')."""
    offenders = []
    for path in modules():
        if path == FAMILY_MODULE:
            continue
        for line, name in family_names_branched_on(path.read_text(encoding="utf-8")):
            offenders.append(f"{path.relative_to(PACKAGE)}:{line} {name!r}")
    assert offenders == []


def test_the_check_above_sees_each_kind_of_branch():
    source = ('if family == "binomial": pass\n'
              'if family in ("gaussian", "poisson"): pass\n'
              'words = {"poisson": "expected"}\n'
              'x = table["binomial"]\n'
              'def f(family="gaussian"): raise ValueError("a binomial response")\n')
    found = [line for line, _ in family_names_branched_on(source)]
    assert found == [1, 2, 2, 3, 4]


@pytest.mark.parametrize("path", modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_only_go_down(path):
    room = room_of(path)
    if room not in ALLOWED:
        return
    allowed = ALLOWED[room] | {room}
    wrong = sorted(set(imported_rooms(path)) - allowed - {"__init__", "__version__"})
    assert wrong == [], f"{room} imports from {wrong}"


def test_the_layer_rule_reads_relative_imports():
    rooms = set(imported_rooms(PACKAGE / "core" / "path.py"))
    assert {"core", "errors"} <= rooms and "choose" not in rooms
    assert "core" in set(imported_rooms(PACKAGE / "choose" / "problem.py"))


def test_every_default_in_the_help_comes_from_the_defaults_module():
    """The help text states each default as the run uses it (issue: each default in one place)."""
    from pathfinder.cli import build_parser

    parser = build_parser()
    explore = next(a for a in parser._subparsers._group_actions[0].choices.items()
                   if a[0] == "explore")[1]
    text = " ".join(explore.format_help().split())
    for value in (defaults.FOLDS, defaults.INNER_FOLDS, defaults.GRID_PER_DECADE, defaults.SEED,
                  defaults.STABILITY_PAIRS, defaults.STABILITY_THRESHOLD, defaults.METRIC):
        assert f"default {value}" in text
    assert "default " + ",".join(f"{m:g}" for m in defaults.MIXES) in text


def test_study_options_take_their_defaults_from_the_defaults_module():
    from pathfinder.study import StudyOptions

    options = StudyOptions(response="y")
    assert options.folds == defaults.FOLDS
    assert options.inner_folds == defaults.INNER_FOLDS
    assert options.n_pairs == defaults.STABILITY_PAIRS
    assert options.nested_pairs == defaults.NESTED_STABILITY_PAIRS
    assert options.mixes == defaults.MIXES
    assert options.seed == defaults.SEED


def test_the_compiled_kernels_know_the_families_by_the_same_codes():
    from pathfinder.core import kernels, kernels_subsets
    from pathfinder.core.families import BINOMIAL, GAUSSIAN, NEGATIVE_BINOMIAL, POISSON

    assert kernels.BINOMIAL_ROWS == BINOMIAL.code
    assert kernels.NEGATIVE_BINOMIAL_ROWS == NEGATIVE_BINOMIAL.code
    assert (kernels_subsets.GAUSSIAN, kernels_subsets.BINOMIAL, kernels_subsets.POISSON,
            kernels_subsets.NEGATIVE_BINOMIAL) == (
        GAUSSIAN.code, BINOMIAL.code, POISSON.code, NEGATIVE_BINOMIAL.code)
