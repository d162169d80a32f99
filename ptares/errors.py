"""The one exception type for mistakes in what a user gave ptares.

Configuration faults, unreadable files and inconsistent datasets raise
:class:`InputError`.  It carries where the fault is (a dotted config path such
as ``array.pulsars[2].dec``, or a file name) so the command line can print it
as a single line and exit with status 2.  Programming errors are left as
ordinary exceptions with their tracebacks.
"""

from __future__ import annotations

import os
import stat

__all__ = ["InputError", "PhysicsWarning", "regular_file"]


class InputError(Exception):
    """A user-supplied value, file or dataset that ptares cannot use.

    Parameters
    ----------
    message
        What is wrong, in words a user can act on.
    where
        The config path or file name the fault belongs to, if any.
    """

    def __init__(self, message: str, where: str | None = None):
        self.message = message
        self.where = where
        super().__init__(self.line())

    def line(self) -> str:
        """The fault as one line: ``where: message``."""
        return f"{self.where}: {self.message}" if self.where else self.message


class PhysicsWarning(UserWarning):
    """Input that is valid but physically unusual (a binary close to merger, say)."""


_SPECIAL = ((stat.S_ISFIFO, "a pipe"), (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
            (stat.S_ISSOCK, "a socket"))


def regular_file(path) -> os.stat_result:
    """``os.stat`` of the file a user named, refusing one that is missing, unreadable or not a regular
    file (a directory, pipe, device or socket: reading a pipe or a stream such as /dev/zero would never end)."""
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise InputError("file not found", str(path)) from None
    except OSError as exc:
        raise InputError(f"cannot read file ({exc.strerror or exc})", str(path)) from None
    if stat.S_ISDIR(info.st_mode):
        raise InputError("is a directory, not a file", str(path))
    if not stat.S_ISREG(info.st_mode):
        kind = next((words for test, words in _SPECIAL if test(info.st_mode)), "something else")
        raise InputError(f"is not a regular file (it is {kind})", str(path))
    return info
