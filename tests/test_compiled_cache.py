"""Compiled loops where numba cannot write its cache (read-only install, home not writable).

numba's own settings stand in for such a machine: only the folder named by
NUMBA_CACHE_DIR may hold the cache, and that folder cannot be created (its
parent is a file), so numba finds no writable place at all. Each case runs in
a fresh process, since the cache place is chosen at import.
"""

import os
import subprocess
import sys

SCRIPT = """
import numpy as np
{patch}
import pathfinder
rng = np.random.default_rng(1)
X = rng.normal(size=(40, 3))
y = X[:, 0] + rng.normal(size=40)
fit = pathfinder.fit_path(X, y, penalties=np.array([0.5, 0.1]))
print(int((fit.coef[-1] != 0).sum()))
"""

NO_TEMPORARY_FOLDER = """
import tempfile
def refuse(*args, **kwargs):
    raise PermissionError(13, "Permission denied")
tempfile.mkdtemp = refuse
"""


def _run(tmp_path, patch=""):
    blocker = tmp_path / "a_file"
    blocker.write_text("not a folder")
    temporary = tmp_path / "temporary"
    temporary.mkdir()
    env = dict(os.environ, NUMBA_CACHE_LOCATOR_CLASSES="UserProvidedCacheLocator",
               NUMBA_CACHE_DIR=str(blocker / "cache"), TMPDIR=str(temporary))
    result = subprocess.run([sys.executable, "-c", SCRIPT.format(patch=patch)], env=env,
                            capture_output=True, text=True, timeout=300, cwd=tmp_path)
    return result, temporary


def test_no_writable_cache_place_runs_quietly_and_leaves_nothing(tmp_path):
    result, temporary = _run(tmp_path)
    assert result.returncode == 0, result.stderr
    assert result.stderr == ""
    assert int(result.stdout) >= 1
    assert list(temporary.iterdir()) == []      # the private cache folder went at exit


def test_without_even_a_temporary_folder_the_loops_run_uncached(tmp_path):
    result, _ = _run(tmp_path, patch=NO_TEMPORARY_FOLDER)
    assert result.returncode == 0, result.stderr
    assert result.stderr == ""
    assert int(result.stdout) >= 1
