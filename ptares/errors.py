"""The one exception type for mistakes in what a user gave ptares.

Configuration faults, unreadable files and inconsistent datasets raise
:class:`InputError`.  It carries where the fault is (a dotted config path such
as ``array.pulsars[2].dec``, or a file name) so the command line can print it
as a single line and exit with status 2.  Programming errors are left as
ordinary exceptions with their tracebacks.
"""

from __future__ import annotations

__all__ = ["InputError", "PhysicsWarning"]


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
