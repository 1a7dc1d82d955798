"""An output folder that is complete or absent, and written by one run at a time.

Results are written into a hidden temporary folder beside the target and
renamed into place only when every file is written, so an interrupted run
(Ctrl-C, a stop signal, a crash, a full disk) leaves no half-written output
behind. A target that already holds files is refused unless the caller allows
overwriting.

A run holds a lock on its target from start to finish (:func:`output_lock`):
a second run aimed at the same folder while the first is busy is refused at
once, instead of silently replacing the first run's results when it ends. The
lock is an operating-system lock on a small hidden file beside the target
(``.NAME.lock``), released even when a run is killed, and the file is removed
when the run ends.

Operating-system errors (no permission, a read-only place, a full disk) become
one :class:`InputError` line naming the path.
"""

from __future__ import annotations

import errno
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

from ..errors import InputError

_HELD: set = set()   # targets this process holds the lock of


def os_error_line(error: OSError, path=None, doing: str = "write") -> str:
    """One line for an operating-system error: what, where, what to do."""
    where = path if path is not None else (error.filename or "the output")
    reason = error.strerror or str(error)
    if error.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", -1)):
        advice = "free some space there, or choose another place"
    elif error.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
        advice = "choose a place you may write to"
    else:
        advice = "check the path, or choose another place"
    return f"cannot {doing} {where} ({reason}); {advice}"


def check_target(target, *, overwrite: bool = False, inputs=()) -> Path:
    """Refuse, before any work, a target that cannot or must not be written.

    The target must not be a file, must not be the current folder or one of
    its parents, must not hold any of ``inputs`` (replacing it would delete
    them), and must be empty unless ``overwrite`` is given.
    """
    target = Path(target).expanduser().resolve()
    if target.exists() and not target.is_dir():
        raise InputError(f"the output path {target} exists and is not a folder: choose another --out")
    here = Path.cwd().resolve()
    if target == here or target in here.parents or target.parent == target:
        raise InputError(f"the output folder {target} is the current folder or holds it: "
                         "give --out a new folder, such as --out results")
    for source in inputs:
        source = Path(source).expanduser().resolve()
        if source == target or target in source.parents:
            raise InputError(f"the output folder {target} holds the input {source.name}: "
                             "give --out a folder of its own, such as --out results")
    try:
        not_empty = target.is_dir() and any(target.iterdir())
    except OSError as error:
        raise InputError(os_error_line(error, target, "look into")) from None
    if not_empty and not overwrite:
        raise InputError(f"the output folder {target} is not empty: choose another --out, "
                         "or add --overwrite to replace it")
    return target


def _existing_ancestor(path: Path) -> Path:
    while not path.exists() and path.parent != path:
        path = path.parent
    return path


def _lock_file(target: Path) -> Path:
    """``.NAME.lock`` in the target's parent, or in its nearest folder that exists."""
    home = _existing_ancestor(target.parent)
    rest = target.relative_to(home).parts
    return home / f".{'.'.join(rest)}.lock"


def _try_lock(handle) -> bool:
    try:
        import fcntl
    except ImportError:   # Windows
        import msvcrt
        try:
            msvcrt.locking(handle.fileno(), msvcrt.LK_NBLCK, 1)
            return True
        except OSError:
            return False
    try:
        fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        return True
    except OSError as error:
        if error.errno in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
            return False
        raise


def _still_the_file(handle, path: Path) -> bool:
    try:
        return os.path.samestat(os.fstat(handle.fileno()), os.stat(path))
    except OSError:
        return False


@contextmanager
def output_lock(target):
    """Hold the lock on ``target`` while the block runs; refuse if another run holds it.

    Taken again by the same process, it is simply held on; the lock file is
    removed when the outermost holder ends.
    """
    target = Path(target).expanduser().resolve()
    if target in _HELD:
        yield target
        return
    lock = _lock_file(target)
    while True:
        try:
            handle = open(lock, "a+b")
        except OSError as error:
            raise InputError(os_error_line(error, lock.parent, "write in")) from None
        if not _try_lock(handle):
            handle.close()
            raise InputError(f"another pathfinder run is writing to {target} now (it holds "
                             f"{lock.name}); wait for it to finish, or choose another --out")
        if _still_the_file(handle, lock):
            break
        handle.close()   # the earlier holder removed the file meanwhile: lock the new one
    _HELD.add(target)
    try:
        yield target
    finally:
        _HELD.discard(target)
        lock.unlink(missing_ok=True)   # before the lock is released, so no one locks a removed file
        handle.close()


@contextmanager
def output_folder(target, *, overwrite: bool = False, inputs=()):
    """Yield a temporary folder; on success it becomes ``target``, on failure it vanishes.

    The target is checked again at the end (it may have changed while the run
    worked), under the lock on it.
    """
    with output_lock(target):
        target = check_target(target, overwrite=overwrite, inputs=inputs)
        try:
            target.parent.mkdir(parents=True, exist_ok=True)
            partial = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".partial",
                                            dir=target.parent))
        except OSError as error:
            raise InputError(os_error_line(error, target.parent, "write in")) from None
        try:
            yield partial
            _put_in_place(partial, target, overwrite)
        except OSError as error:
            raise InputError(os_error_line(error, target, "write the output folder")) from None
        finally:
            shutil.rmtree(partial, ignore_errors=True)


def _put_in_place(partial: Path, target: Path, overwrite: bool) -> None:
    check_target(target, overwrite=overwrite)
    if target.exists():
        retired = target.with_name(f".{target.name}.replaced-{os.getpid()}")
        target.rename(retired)
        partial.rename(target)
        shutil.rmtree(retired, ignore_errors=True)
        return
    try:
        partial.rename(target)
    except OSError as error:
        if error.errno in (errno.ENOTEMPTY, errno.EEXIST):
            raise InputError(f"the output folder {target} was filled by something else while "
                             "this run worked; run again with another --out") from None
        raise
