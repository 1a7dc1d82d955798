"""The errors a user of pathfinder sees.

Every error a user can cause is an :class:`InputError` carrying one line that
says what is wrong, where, and what to do. The command line turns it into that
line on standard error and exit status 2, never a traceback.
"""


class PathfinderError(Exception):
    """Base class of pathfinder's own errors."""


class InputError(PathfinderError, ValueError):
    """Bad input or usage: one clear line (what, where, what to do)."""

    def __init__(self, message: str):
        message = " ".join(str(message).split())  # always one line
        super().__init__(message)
        self.message = message


class FitWarning(UserWarning):
    """Something in a fit the user should know about (no convergence, separation)."""
