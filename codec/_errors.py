"""The project's error hierarchy.

Every error a user can cause derives from :class:`CoefwireError` and from the
matching built-in type, so callers may catch either.  The CLI turns these into a
one-sentence message and exit status 2; anything else is our bug and stays loud.
"""

__all__ = ["CoefwireError", "InputError", "FrameError", "ProfileError"]


class CoefwireError(Exception):
    """Root of the errors a user can cause (bad input, bad stream, bad profile).

    Parameters
    ----------
    message : str
        One sentence: what went wrong, where, and what to do.
    where : str, optional
        The place it happened (a file, row and column, a frame and field).
    """

    def __init__(self, message: str, where: str | None = None):
        self.message = message
        self.where = where
        super().__init__(f"{where}: {message}" if where else message)


class InputError(CoefwireError, ValueError):
    """Sample data that cannot be coded (ragged CSV, NaN, wrong shape...)."""


class FrameError(CoefwireError, ValueError):
    """A byte stream or frame that is not ours or fails its checks."""


class ProfileError(CoefwireError, ValueError):
    """A profile or link file with unknown keys or impossible values."""
