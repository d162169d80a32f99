"""One run per output folder: a second run into a folder in use stops with one line.

The lock is an advisory ``flock`` on ``DIR/.ptares-lock`` (released by the operating system when
the holding process ends, however it ends).  A folder the lock had to create is removed again
when the run leaves it empty, so that a run refused for bad input leaves nothing behind.
"""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

from ptares.errors import InputError

try:
    import fcntl
except ImportError:  # pragma: no cover - not POSIX: runs are not locked
    fcntl = None

__all__ = ["folder_lock", "LOCK_NAME"]

LOCK_NAME = ".ptares-lock"


def _created_folders(out: Path) -> list:
    """The folders ``mkdir(parents=True)`` of ``out`` would create, deepest first."""
    missing = []
    folder = out
    while not folder.exists():
        missing.append(folder)
        if folder.parent == folder:
            break
        folder = folder.parent
    return missing


@contextlib.contextmanager
def folder_lock(out):
    """Hold ``out`` for this run.  Where the folder cannot be made (a file in the way, no permission)
    nothing is locked and the run's own checks report the problem."""
    out = Path(out)
    missing = _created_folders(out)
    try:
        out.mkdir(parents=True, exist_ok=True)
        handle = open(out / LOCK_NAME, "a+")
    except OSError:
        yield
        return
    try:
        if fcntl is not None:
            try:
                fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                handle.close()
                handle = None
                raise InputError("is in use by another ptares run; wait for it to finish or choose another output folder",
                                 str(out)) from None
        handle.seek(0)
        handle.truncate()
        handle.write(f"pid {os.getpid()}\n")
        handle.flush()
        yield
    finally:
        if handle is not None:
            with contextlib.suppress(OSError):
                (out / LOCK_NAME).unlink()
            handle.close()  # releases the flock
            for folder in missing:  # only the folders this run made, and only if it left them empty
                with contextlib.suppress(OSError):
                    folder.rmdir()
