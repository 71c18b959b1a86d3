"""Frame layouts as registered units: the :class:`Layout` protocol, its values and the registry.

A layout is one object that says how frames of one version number are
written and read; the encoder and the decoder ask it, never the version
number (compare :func:`codec.transform.bases.register_basis`).  The built-in
layouts 1 to 4 live one per module beside this one and register themselves
when first asked for.  Adding a layout is one class and one
:func:`register_layout` call (``DEVELOPERS.md``, "Adding a layout").

Values across the seams are frozen dataclasses: :class:`CodedFrames` (what the
encoder hands a layout), :class:`PackedFrames` (what packing gives back),
:class:`ParseContext` and :class:`ParsedFrames` (what a parser returns).
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Protocol, runtime_checkable

import numpy as np

__all__ = [
    "Layout",
    "LengthField",
    "CodedFrames",
    "PackedFrames",
    "ParseContext",
    "ParsedFrames",
    "Verdicts",
    "register_layout",
    "unregister_layout",
    "layout_for",
    "layouts",
    "length_rules",
]


@dataclass(frozen=True)
class LengthField:
    """Where a layout's frames keep their length (the envelope rule, ``envelope.py``).

    ``kind`` is ``"fixed16"`` (16 bits in bytes 3-4 of the frame, read once
    ``need`` bytes are in) or ``"flagged"`` (long flag at bit 20, then 11 or
    27 bits).  ``min_bytes`` is the shortest frame the layout can produce: a
    shorter claimed length is not a frame.

    Attributes
    ----------
    kind : {"fixed16", "flagged"}
        The rule.
    min_bytes : int
        Shortest frame of the layout.
    need : int
        Bytes the rule reads before it knows the length.

    Examples
    --------
    >>> layout_for(1).length_field.kind, layout_for(3).length_field.kind
    ('fixed16', 'flagged')
    """

    kind: str
    min_bytes: int
    need: int = 5


@dataclass(frozen=True)
class CodedFrames:
    """What the encoder hands a layout: one row per time window of one channel.

    Rows are window-major, channel-minor.  Per row: ``channel``, ``sequence``
    (window number in the stream), ``valid`` (real samples of the window),
    ``step_code``, ``mean`` (mean codes, None when the reference is
    ``total``), ``q`` (integer codes, rows of N), ``lag`` (None, or per row the
    lag of its long-term prediction, 0 where not predicted; layouts 5 to 7), ``trellis`` (None,
    or per row whether ``q`` holds levels of dependent quantization), ``alternate`` (None, or
    per row whether ``q`` is on :func:`codec.transform.bases.alternate_basis`; layout 6).
    Per stream: the profile's ``profile_id``, frame length ``n``,
    ``channels``, ``basis_code``, ``multi`` (one frame carries every channel
    of a window) and ``windows_per_frame``.

    Attributes
    ----------
    channel, sequence, valid, step_code, mean, q, trellis, lag, alternate
        Per row, as above.
    profile_id, n, channels, basis_code, multi, windows_per_frame
        Per stream, as above.

    Examples
    --------
    One window of eight codes packed by layout 1 and parsed back (the parser
    trusts the CRC, which the frame search checks first):

    >>> import numpy as np
    >>> from codec.layouts.envelope import FrameKey
    >>> coded = CodedFrames(channel=np.array([0]), sequence=np.array([0]),
    ...     valid=np.array([8]), step_code=np.array([512]), mean=None,
    ...     q=np.array([[3, 0, -1, 0, 0, 0, 0, 0]]), profile_id=0xABCD, n=8, channels=1,
    ...     basis_code=0)
    >>> packed = layout_for(1).pack(coded, FrameKey(bytes(32)))
    >>> len(packed.data), int(packed.row_bits.sum()) == 8 * len(packed.data)
    (21, True)
    >>> ctx = ParseContext(n=8, channels=1, has_mean=False, profile_id=0xABCD)
    >>> parsed = layout_for(1).parse(packed.data, np.array([0]), np.array([21]), ctx)
    >>> parsed.verdict, parsed.q.tolist(), parsed.terms.tolist()
    (('ok',), [[3, 0, -1, 0, 0, 0, 0, 0]], [2])
    """

    channel: np.ndarray
    sequence: np.ndarray
    valid: np.ndarray
    step_code: np.ndarray
    mean: np.ndarray | None
    q: np.ndarray
    profile_id: int
    n: int
    channels: int
    basis_code: int
    multi: bool = False
    windows_per_frame: int = 1
    trellis: np.ndarray | None = None
    lag: np.ndarray | None = None
    alternate: np.ndarray | None = None


@dataclass(frozen=True)
class PackedFrames:
    """Frames on the wire and the encoder's account of their bits.

    ``data``: the frames back to back.  ``row_bits``: bits of each row of the
    :class:`CodedFrames` (a frame's bits shared by its rows, so they add up to
    the stream).  ``header_bits``: bits of the stream that are not coefficient
    data.  ``row_frame``: the frame (0, 1, ... in stream order) of each row.
    ``frame_header_bits`` (optional, layouts 3 to 5): each frame's share of
    ``header_bits``, so frames of two packings can be spliced.

    Attributes
    ----------
    data, row_bits, header_bits, row_frame, frame_header_bits
        As above; see the example of :class:`CodedFrames`.

    Examples
    --------
    >>> import numpy as np
    >>> p = PackedFrames(b"", np.zeros(0, np.int64), 0, np.zeros(0, np.int64))
    >>> p.header_bits
    0
    """

    data: bytes
    row_bits: np.ndarray
    header_bits: int
    row_frame: np.ndarray
    frame_header_bits: np.ndarray | None = None


@dataclass(frozen=True)
class ParseContext:
    """What a parser knows of the profile: frame length, channels, mean, id and basis.

    Attributes
    ----------
    n : int
        Frame length N.
    channels : int
        Channels of the profile.
    has_mean : bool
        Whether windows carry a mean (the ``ac`` reference).
    profile_id : int
        The profile's 16-bit identifier; frames naming another are foreign.
    basis_code, basis_name
        The profile's basis.

    Examples
    --------
    See :class:`CodedFrames`; a frame naming another profile is refused, not raised:

    >>> import numpy as np
    >>> from codec.layouts.envelope import FrameKey
    >>> coded = CodedFrames(np.array([0]), np.array([0]), np.array([8]), np.array([512]),
    ...                     None, np.zeros((1, 8), np.int64), 0xABCD, 8, 1, 0)
    >>> data = layout_for(1).pack(coded, FrameKey(bytes(32))).data
    >>> other = ParseContext(n=8, channels=1, has_mean=False, profile_id=0x1234)
    >>> layout_for(1).parse(data, np.array([0]), np.array([len(data)]), other).verdict
    ('foreign_profile',)
    """

    n: int
    channels: int
    has_mean: bool
    profile_id: int = 0
    basis_code: int = 0
    basis_name: str = ""


@dataclass(frozen=True)
class ParsedFrames:
    """What a parser returns for CRC-valid frames of its layout.

    Per frame: ``verdict`` (``"ok"`` or the short key of why the frame is
    refused), ``detail`` (the reason in words), ``sequence``, ``valid`` (real
    samples of its last window), ``terms`` (coded terms) and ``step_code``
    (the coarsest step, for the frame table), ``header`` (the layout's own
    header fields by the names of its field table).  Per row (one window of
    one channel): ``row_frame``, ``row_channel``, ``row_offset`` (window
    number minus the frame's), ``row_valid``, ``row_step``, ``row_mean``
    (None without means), ``row_count`` (coded coefficients), ``row_trellis``
    (levels of dependent quantization), the integer codes ``q`` and
    ``row_lag`` (None, or each row's long-term prediction lag, 0 where not
    predicted: :func:`codec.transform.predict.add_predictions`) and
    ``row_alternate`` (None, or whether each row is on the alternate basis,
    layouts 6 and 7: :func:`codec.transform.bases.alternate_basis`) and
    ``row_all_terms`` (None, or whether each row's channel sends no count in
    its frame and codes every coefficient, layout 7).  Rows of
    refused frames hold whatever was read; the decoder never uses them.

    Attributes
    ----------
    verdict, detail, sequence, valid, terms, step_code, header
        Per frame, as above.
    row_frame, row_channel, row_offset, row_valid, row_step, row_mean, row_count, row_trellis, q
    row_lag, row_alternate, row_all_terms
        Per row, as above.

    Examples
    --------
    See :class:`CodedFrames`.  The header is read-only:

    >>> import numpy as np
    >>> from codec.layouts.envelope import FrameKey
    >>> coded = CodedFrames(np.array([0]), np.array([5]), np.array([8]), np.array([512]),
    ...                     None, np.zeros((1, 8), np.int64), 0xABCD, 8, 1, 0)
    >>> data = layout_for(1).pack(coded, FrameKey(bytes(32))).data
    >>> ctx = ParseContext(n=8, channels=1, has_mean=False, profile_id=0xABCD)
    >>> parsed = layout_for(1).parse(data, np.array([0]), np.array([len(data)]), ctx)
    >>> parsed.sequence.tolist()
    [5]
    >>> parsed.header["sequence"] = 0
    Traceback (most recent call last):
    ...
    TypeError: 'mappingproxy' object does not support item assignment
    """

    verdict: tuple[str, ...]
    detail: tuple[str, ...]
    sequence: np.ndarray
    valid: np.ndarray
    terms: np.ndarray
    step_code: np.ndarray
    header: Mapping[str, np.ndarray]
    row_frame: np.ndarray
    row_channel: np.ndarray
    row_offset: np.ndarray
    row_valid: np.ndarray
    row_step: np.ndarray
    row_mean: np.ndarray | None
    row_count: np.ndarray
    row_trellis: np.ndarray
    q: np.ndarray
    row_lag: np.ndarray | None = None
    row_alternate: np.ndarray | None = None
    row_all_terms: np.ndarray | None = None

    def __post_init__(self):
        object.__setattr__(self, "header", MappingProxyType(dict(self.header)))  # read-only


class Verdicts:
    """Per-frame verdicts being built: the first refusal of a frame is the one that stays."""

    def __init__(self, nf: int):
        self.ok = np.ones(nf, dtype=bool)  # mirror of verdict == "ok", for whole-array selection
        self.verdict = ["ok"] * nf
        self.detail = [""] * nf

    def refuse(self, bad: np.ndarray, key: str, words: str | Callable[[int], str],
               idx: np.ndarray | None = None) -> None:
        """Refuse the frames ``idx[bad]`` (all frames when ``idx`` is None) not refused yet."""
        idx = np.arange(self.ok.size) if idx is None else idx
        for f in idx[bad & self.ok[idx]].tolist():  # only the refused frames, usually none
            self.ok[f] = False
            self.verdict[f] = key
            self.detail[f] = words(f) if callable(words) else words


@runtime_checkable
class Layout(Protocol):
    """A frame layout: how frames of one version number are chosen, packed and parsed.

    Attributes
    ----------
    version : int
        The version nibble (1..14; 15 is the gap-mask frame kind).
    sequence_bits : int
        Bits of the sequence field: a frame's window is known modulo 2**bits.
    length_field : LengthField
        The envelope rule for the frame length.
    supports_frame_scope : bool
        Whether several windows share one frame and so one fidelity budget.
    has_trellis : bool
        Whether a frame may carry levels of dependent quantization.
    spends_slack : bool
        Whether the encoder spends each budget's rest by zeroing small codes.

    A layout may also set ``predicts = True`` (optional; read with
    ``getattr``): its frames carry long-term prediction
    (:class:`CodedFrames` ``lag``), which the encoder then searches in
    frame scope (layouts 5 to 7); and ``switches_basis = True``: its frames
    may put a channel's windows on :func:`codec.transform.bases.alternate_basis`
    (:class:`CodedFrames` ``alternate``), which the encoder then chooses per
    budget block in frame scope (layout 6).

    Examples
    --------
    >>> lay = layout_for(4)
    >>> isinstance(lay, Layout), lay.has_trellis, lay.supports_frame_scope
    (True, True, True)
    >>> layout_for(1).supports_frame_scope
    False
    """

    version: int
    sequence_bits: int
    length_field: LengthField
    supports_frame_scope: bool
    has_trellis: bool
    spends_slack: bool

    def windows_per_frame(self, profile) -> int:
        """Most windows one frame carries under ``profile``."""

    def max_frame_bytes(self, profile) -> int:
        """A bound on the bytes of any frame of this layout under ``profile``."""

    def choose_codes(self, cx: np.ndarray, mean: np.ndarray | None, dc: np.ndarray,
                     budget: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
        """Per window, the (step code, rounding offset) that meets ``budget`` in fewest bits."""

    def block_offset(self) -> float:
        """Rounding offset of the one-step-per-budget-block choice (frame scope)."""

    def pack(self, coded: CodedFrames, key) -> PackedFrames:
        """Frames of ``coded`` signed with ``key`` (:class:`codec.layouts.envelope.FrameKey`)."""

    def parse(self, data: bytes, offsets: np.ndarray, lengths: np.ndarray,
              ctx: ParseContext) -> ParsedFrames:
        """CRC-valid frames of this layout at ``offsets`` of ``data``; never raises on content."""


_LAYOUTS: dict[int, Layout] = {}
_BUILTIN = (".v1", ".v2", ".v3", ".v4", ".v5", ".v6", ".v7")
#: Versions of the built-in layouts: refused to other modules even before those load.
_RESERVED = range(1, 8)
_state = {"loaded": False, "rules": None}
_KINDS = {"fixed16": 1, "flagged": 2}


def _builtins() -> None:
    if not _state["loaded"]:
        _state["loaded"] = True
        for mod in _BUILTIN:  # each module registers its layout on import
            importlib.import_module(mod, __package__)


def register_layout(layout: Layout) -> Layout:
    """Add ``layout`` under its version number; returns it.

    Parameters
    ----------
    layout : Layout
        An object with every member of the :class:`Layout` protocol.

    Returns
    -------
    Layout
        ``layout`` itself.

    Raises
    ------
    ValueError
        For a version outside 1..14, one already taken or belonging to a built-in
        layout, or an unknown length rule.

    Examples
    --------
    ``tests/test_layout_toy.py`` registers a whole toy layout.  Registering the
    same object again changes nothing; another object under a taken version is refused:

    >>> lay = layout_for(3)
    >>> register_layout(lay) is lay
    True
    >>> from codec.layouts.v3 import Layout3
    >>> register_layout(Layout3(version=3))
    Traceback (most recent call last):
    ...
    ValueError: layout version 3 is already registered
    """
    if not isinstance(layout, Layout):
        raise TypeError(f"{layout!r} does not have every member of the Layout protocol")
    v = int(layout.version)
    if not 1 <= v <= 14:
        raise ValueError(f"layout version {v} is outside 1..14 (15 is the gap-mask frame)")
    if v in _RESERVED and not type(layout).__module__.startswith(f"{__package__}."):
        raise ValueError(f"layout version {v} belongs to a built-in layout; choose another")
    if v in _LAYOUTS and _LAYOUTS[v] is not layout:
        raise ValueError(f"layout version {v} is already registered")
    from .envelope import EXTENT_BYTES

    lf = layout.length_field
    if lf.kind not in _KINDS or lf.need > EXTENT_BYTES:
        raise ValueError(f"layout {v}: unknown length rule {lf.kind!r} or one reading past "
                         f"{EXTENT_BYTES} bytes")
    _LAYOUTS[v] = layout
    _state["rules"] = None
    return layout


def unregister_layout(version: int) -> None:
    """Remove the layout of ``version`` (tests add and remove toy layouts).

    Parameters
    ----------
    version : int
        The version number; one with no layout is ignored.

    Examples
    --------
    >>> unregister_layout(9)  # nothing there: no effect
    >>> [lay.version for lay in layouts()][:4]
    [1, 2, 3, 4]
    """
    _LAYOUTS.pop(int(version), None)
    _state["rules"] = None


def layout_for(version: int) -> Layout:
    """The registered layout of ``version``.

    Parameters
    ----------
    version : int
        The version nibble of the frames.

    Returns
    -------
    Layout
        The layout registered under it.

    Raises
    ------
    ValueError
        If there is none.

    Examples
    --------
    >>> layout_for(2).has_trellis, layout_for(4).has_trellis
    (False, True)
    >>> layout_for(13)
    Traceback (most recent call last):
    ...
    ValueError: no frame layout has version 13; registered: [1, 2, 3, 4, 5, 6, 7]
    """
    _builtins()
    try:
        return _LAYOUTS[int(version)]
    except KeyError:
        raise ValueError(f"no frame layout has version {version}; registered: "
                         f"{sorted(_LAYOUTS)}") from None


def layouts() -> list[Layout]:
    """Every registered layout, by version number."""
    _builtins()
    return [_LAYOUTS[v] for v in sorted(_LAYOUTS)]


def length_rules() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per version nibble (16 entries): rule kind (0 none, 1 fixed16, 2 flagged), smallest
    frame length and bytes the rule reads; whole-array tables for the frame search."""
    _builtins()
    if _state["rules"] is None:
        kind, minimum, need = (np.zeros(16, np.int64) for _ in range(3))
        for v, lay in _LAYOUTS.items():
            lf = lay.length_field
            kind[v], minimum[v], need[v] = _KINDS[lf.kind], lf.min_bytes, lf.need
        _state["rules"] = (kind, minimum, need)
    return _state["rules"]
