"""Reading human-written TOML files safely: size and nesting checked before parsing.

The standard parser recurses once per nesting level (50 000 levels exhaust the
stack) and slows down with dotted keys of thousands of parts, so every TOML
file the project reads (profiles, stream notes, dictionary notes, the note in a
basis file) passes through :func:`loads_toml`.  This module depends on nothing
else of the codec, so any module may use it without an import cycle.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import numpy as np

from ._errors import ProfileError

__all__ = ["loads_toml", "read_toml", "toml_depth", "MAX_TOML_BYTES", "MAX_TOML_DEPTH"]

#: Largest TOML file read (a profile of 256 channels is about 25 kB).
MAX_TOML_BYTES = 1 << 20
#: Deepest nesting of arrays, inline tables and dotted keys in a TOML file read.
MAX_TOML_DEPTH = 32

_TOKEN = re.compile("\"\"\"|'''|\"|'|#|\n")
_KEY_END = re.compile(r"[^\w.\- \t]")  # what cannot be part of a (dotted) bare key
_HEADER = re.compile(r"^[ \t]*\[\[?[\w.\- \t]*\]", re.MULTILINE)  # [table] or [[array]]
_OPEN_CLOSE = np.zeros(256, dtype=np.int64)
_OPEN_CLOSE[[ord("["), ord("{")]] = 1
_OPEN_CLOSE[[ord("]"), ord("}")]] = -1


def _escaped(text: str, p: int) -> bool:
    """Whether the quote at ``p`` follows an odd run of backslashes."""
    i = p
    while i > 0 and text[i - 1] == "\\":
        i -= 1
    return (p - i) % 2 == 1


def _without_strings(text: str) -> str:
    """``text`` with strings and comments cut out (their brackets and dots are not structure).

    One pass over quote, ``#`` and newline tokens, linear in the text (no
    regular expression that could backtrack over a hostile file).
    """
    keep, state, cut = [], None, 0
    for m in _TOKEN.finditer(text):
        t, p = m.group(), m.start()
        if state is None:
            if t != "\n":
                keep.append(text[cut:p])
                state = t
        elif state == "#":
            if t == "\n":
                state, cut = None, p
        elif t == "\n" and len(state) == 1:  # a one-line string ends here (or is invalid)
            state, cut = None, p
        elif t[0] == state[0] and len(t) >= len(state):
            if state[0] == "'" or not _escaped(text, p):  # literal strings have no escapes
                state, cut = None, p + len(state)
    if state is None:
        keep.append(text[cut:])
    return "".join(keep)


def toml_depth(text: str) -> int:
    """How deep ``text`` nests: brackets and braces open at once, or parts of a dotted key.

    Counted on the text with strings and comments removed, before parsing:
    the standard parser recurses once per level (50 000 levels exhaust the
    stack) and slows down with dotted keys of thousands of parts.
    """
    bare = _without_strings(text)
    marks = _OPEN_CLOSE[np.frombuffer(bare.encode("utf-8"), dtype=np.uint8)]
    brackets = int(np.cumsum(marks).max(initial=0))
    # dotted keys: before an '=' (also inside inline tables) or in a [table.header]
    keys = [_KEY_END.split(piece)[-1] for piece in bare.split("=")[:-1]]
    keys += _HEADER.findall(bare)
    dots = max((k.count(".") for k in keys), default=0)
    return max(brackets, dots + 1)


def loads_toml(text: str, where: str, what: str = "profile") -> dict:
    """Parse TOML ``text`` of a ``what``, size and depth checked first (one sentence on error)."""
    if len(text) > MAX_TOML_BYTES:
        raise ProfileError(f"the {what} has {len(text)} characters, over the {MAX_TOML_BYTES} "
                           "read; is this the right file?", where)
    depth = toml_depth(text)
    if depth > MAX_TOML_DEPTH:
        raise ProfileError(f"the {what} nests {depth} levels deep (arrays, tables or dotted "
                           f"keys), over the {MAX_TOML_DEPTH} read; is this the right file?",
                           where)
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"not valid TOML ({exc})", where) from None


def read_toml(path: str | Path, what: str = "profile") -> dict:
    """Parse a human-written TOML file (a ``what``), naming the file on any error.

    TOML only: nothing in the file is executed and it cannot include other files.
    Files over :data:`MAX_TOML_BYTES` or nested over :data:`MAX_TOML_DEPTH`
    levels are refused before parsing.

    Parameters
    ----------
    path : str or Path
        The TOML file.
    what : str
        What the file is, for messages ("profile", "link file").

    Returns
    -------
    dict
        The parsed tables.

    Raises
    ------
    ProfileError
        Naming the file, when it is missing, unreadable, too large or too
        deeply nested, or not valid TOML (TOML 1.0, parsed by ``tomllib``).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     path = pathlib.Path(d) / "p.toml"
    ...     _ = path.write_text("frame_length = 32\\n[[channels]]\\nname = 'x'\\n")
    ...     print(read_toml(path))
    ...     _ = path.write_text("frame_length = \\n")
    ...     try:
    ...         read_toml(path)
    ...     except ProfileError as e:
    ...         print(e.message[:20])
    {'frame_length': 32, 'channels': [{'name': 'x'}]}
    not valid TOML (Inva
    """
    path = Path(path)
    try:
        if path.stat().st_size > 4 * MAX_TOML_BYTES:  # at most 4 UTF-8 bytes per character
            raise ProfileError(f"the {what} file has {path.stat().st_size} bytes, far more "
                               "than a TOML file of settings; is this the right file?",
                               str(path))
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ProfileError(f"no such {what} file; check the path", str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ProfileError(f"cannot read the {what} ({exc.__class__.__name__})",
                           str(path)) from None
    return loads_toml(text, str(path), what)
