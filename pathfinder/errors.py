"""The errors a user of pathfinder sees.

Every error a user can cause is an :class:`InputError` carrying one line that
says what is wrong, where, and what to do. The command line turns it into that
line on standard error and exit status 2, never a traceback.

A message that tells the reader to change a setting names it the way that
reader writes it: ``decimal=','`` in Python, ``--decimal ,`` at the command
line. Write such a setting with :func:`setting`; ``str(error)`` (and
``error.message``) give the Python spelling and :meth:`InputError.for_command_line`
the command-line one.
"""

import re

_OPEN, _BETWEEN, _CLOSE = "\ue000", "\ue001", "\ue002"   # private-use characters, never in text
_BOTH = re.compile(f"{_OPEN}([^{_BETWEEN}]*){_BETWEEN}([^{_CLOSE}]*){_CLOSE}")


def setting(python: str, command_line: str) -> str:
    """A setting named in both spellings, e.g. ``setting("decimal=','", "--decimal ,")``.

    Put the result in an :class:`InputError` message; each reader sees only
    their own spelling.
    """
    return f"{_OPEN}{python}{_BETWEEN}{command_line}{_CLOSE}"


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


class PathfinderError(Exception):
    """Base class of pathfinder's own errors."""


class InputError(PathfinderError, ValueError):
    """Bad input or usage: one clear line (what, where, what to do)."""

    def __init__(self, message: str):
        text = _one_line(message)
        python = _BOTH.sub(lambda m: m.group(1), text)
        super().__init__(python)
        self.message = python
        self.command_line_message = _BOTH.sub(lambda m: m.group(2), text)

    def for_command_line(self) -> str:
        """The message with every setting in its command-line spelling."""
        return self.command_line_message


class FitWarning(UserWarning):
    """Something in a fit the user should know about (no convergence, separation)."""
