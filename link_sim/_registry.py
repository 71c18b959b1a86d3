"""A named registry: the built-in entries fixed, further ones added and withdrawn by name.

The FEC codes (``_fec.py``) and the channel models (``_simulate.py``) are each
one of these, so adding either is one definition plus one registration.
"""

from __future__ import annotations

from collections.abc import Callable

__all__ = ["NamedRegistry"]


class NamedRegistry:
    """Entries by name; the built-in ones can be neither replaced nor withdrawn.

    Parameters
    ----------
    what : str
        What an entry is, for messages ("FEC code", "channel model").
    builtins : dict
        The built-in entries, in the order the command line lists them.

    Examples
    --------
    >>> r = NamedRegistry("colour", {"red": 1})
    >>> r.add("teal", 2)
    >>> r.names(), r.get("teal")
    (('red', 'teal'), 2)
    >>> r.remove("red")
    Traceback (most recent call last):
    ...
    ValueError: the built-in colour 'red' cannot be withdrawn
    """

    def __init__(self, what: str, builtins: dict):
        self.what = what
        self.builtins = tuple(builtins)
        self._entries = dict(builtins)

    def add(self, name: str, entry: Callable | object) -> None:
        """Register ``entry`` under the new ``name`` (ValueError if the name is taken)."""
        if name in self._entries:
            raise ValueError(f"a {self.what} called {name!r} is already registered")
        self._entries[name] = entry

    def remove(self, name: str) -> None:
        """Withdraw a registered entry; an unknown name is ignored."""
        if name in self.builtins:
            raise ValueError(f"the built-in {self.what} {name!r} cannot be withdrawn")
        self._entries.pop(name, None)

    def names(self) -> tuple[str, ...]:
        """Every name on offer: the built-in ones, then the registered ones."""
        return tuple(self._entries)

    def get(self, name: str):
        """The entry called ``name`` (ValueError naming the choices if there is none)."""
        try:
            return self._entries[name]
        except KeyError:
            raise ValueError(f"unknown {self.what} {name!r}; use one of "
                             f"{', '.join(self._entries)}") from None
