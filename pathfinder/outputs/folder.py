"""An output folder that is complete or absent.

Results are written into a hidden temporary folder beside the target and
renamed into place only when every file is written, so an interrupted run
(Ctrl-C, a crash, a full disk) leaves no half-written output behind. A target
that already holds files is refused unless the caller allows overwriting.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

from ..errors import InputError


def check_target(target) -> Path:
    """Refuse early (before any work) a target that cannot be written."""
    target = Path(target)
    if target.exists() and not target.is_dir():
        raise InputError(f"the output path {target} exists and is not a folder: choose another --out")
    return target


@contextmanager
def output_folder(target, *, overwrite: bool = False):
    """Yield a temporary folder; on success it becomes ``target``, on failure it vanishes."""
    target = check_target(target)
    if target.is_dir() and any(target.iterdir()) and not overwrite:
        raise InputError(f"the output folder {target} is not empty: choose another --out, "
                         "or add --overwrite to replace it")
    target.parent.mkdir(parents=True, exist_ok=True)
    partial = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent))
    try:
        yield partial
    except BaseException:
        shutil.rmtree(partial, ignore_errors=True)
        raise
    if target.exists():
        retired = target.with_name(f".{target.name}.replaced-{os.getpid()}")
        target.rename(retired)
        partial.rename(target)
        shutil.rmtree(retired, ignore_errors=True)
    else:
        partial.rename(target)
