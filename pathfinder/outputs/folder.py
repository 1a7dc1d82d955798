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


def check_target(target, *, overwrite: bool = False, inputs=()) -> Path:
    """Refuse, before any work, a target that cannot or must not be written.

    The target must not be a file, must not be the current folder or one of
    its parents, must not hold any of ``inputs`` (replacing it would delete
    them), and must be empty unless ``overwrite`` is given.
    """
    target = Path(target).resolve()
    if target.exists() and not target.is_dir():
        raise InputError(f"the output path {target} exists and is not a folder: choose another --out")
    here = Path.cwd().resolve()
    if target == here or target in here.parents or target.parent == target:
        raise InputError(f"the output folder {target} is the current folder or holds it: "
                         "give --out a new folder, such as --out results")
    for source in inputs:
        source = Path(source).resolve()
        if source == target or target in source.parents:
            raise InputError(f"the output folder {target} holds the input {source.name}: "
                             "give --out a folder of its own, such as --out results")
    if target.is_dir() and any(target.iterdir()) and not overwrite:
        raise InputError(f"the output folder {target} is not empty: choose another --out, "
                         "or add --overwrite to replace it")
    return target


@contextmanager
def output_folder(target, *, overwrite: bool = False, inputs=()):
    """Yield a temporary folder; on success it becomes ``target``, on failure it vanishes."""
    target = check_target(target, overwrite=overwrite, inputs=inputs)
    target.parent.mkdir(parents=True, exist_ok=True)
    partial = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent))
    try:
        yield partial
        if target.exists():
            retired = target.with_name(f".{target.name}.replaced-{os.getpid()}")
            target.rename(retired)
            partial.rename(target)
            shutil.rmtree(retired, ignore_errors=True)
        else:
            partial.rename(target)
    finally:
        shutil.rmtree(partial, ignore_errors=True)
