"""The package list in pyproject.toml must name every subpackage on disk.

The list is explicit because the demo scenario folder is mapped into the
package (as pathfinder._demo); a subpackage left off it would be missing
from an installed copy while the tests, run from the source tree, still pass.
"""

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_every_subpackage_is_installed():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    listed = set(config["tool"]["setuptools"]["packages"])
    on_disk = {".".join(init.parent.relative_to(ROOT).parts)
               for init in (ROOT / "pathfinder").rglob("__init__.py")}
    assert on_disk <= listed, f"add to pyproject.toml: {sorted(on_disk - listed)}"
    assert "pathfinder._demo" in listed
    assert config["tool"]["setuptools"]["package-dir"]["pathfinder._demo"] == "data_examples"
    assert config["tool"]["setuptools"]["package-data"]["pathfinder._demo"] == ["*.csv", "*.json"]
