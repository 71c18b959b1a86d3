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

    Examples
    --------
    >>> e = CoefwireError("the value is not a number; fix the cell", "data.csv row 3")
    >>> str(e)
    'data.csv row 3: the value is not a number; fix the cell'
    """

    def __init__(self, message: str, where: str | None = None):
        self.message = message
        self.where = where
        super().__init__(f"{where}: {message}" if where else message)


class InputError(CoefwireError, ValueError):
    """Sample data that cannot be coded (ragged CSV, NaN, wrong shape...).

    Parameters are those of :class:`CoefwireError`.

    Examples
    --------
    Also a ``ValueError``, so code that knows only the built-in type catches it:

    >>> try:
    ...     raise InputError("NaN in column 2; remove or fill it", "input.csv")
    ... except ValueError as e:
    ...     print(e.where, "|", e.message)
    input.csv | NaN in column 2; remove or fill it
    """


class FrameError(CoefwireError, ValueError):
    """A byte stream or frame that is not ours or fails its checks.

    Parameters are those of :class:`CoefwireError`.

    Examples
    --------
    >>> issubclass(FrameError, CoefwireError) and issubclass(FrameError, ValueError)
    True
    """


class ProfileError(CoefwireError, ValueError):
    """A profile or link file with unknown keys or impossible values.

    Parameters are those of :class:`CoefwireError`.

    Examples
    --------
    >>> issubclass(ProfileError, CoefwireError) and issubclass(ProfileError, ValueError)
    True
    """
