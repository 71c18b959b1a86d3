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
    ``total``), ``q`` (integer codes, rows of N), ``trellis`` (None, or per
    row whether ``q`` holds levels of dependent quantization), ``groups``
    (None, or the frame group of each row: gap-mask frames carry one window).
    Per stream: the profile's ``profile_id``, frame length ``n``,
    ``channels``, ``basis_code``, ``multi`` (one frame carries every channel
    of a window) and ``windows_per_frame``.
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
    groups: np.ndarray | None = None


@dataclass(frozen=True)
class PackedFrames:
    """Frames on the wire and the encoder's account of their bits.

    ``data``: the frames back to back.  ``row_bits``: bits of each row of the
    :class:`CodedFrames` (a frame's bits shared by its rows, so they add up to
    the stream).  ``header_bits``: bits of the stream that are not coefficient
    data.  ``row_frame``: the frame (0, 1, ... in stream order) of each row.
    """

    data: bytes
    row_bits: np.ndarray
    header_bits: int
    row_frame: np.ndarray


@dataclass(frozen=True)
class ParseContext:
    """What a parser knows of the profile: frame length, channels, mean, id and basis."""

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
    (levels of dependent quantization) and the integer codes ``q``.  Rows of
    refused frames hold whatever was read; the decoder never uses them.
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
_BUILTIN = (".v1", ".v2", ".v3", ".v4")
#: Versions of the built-in layouts: refused to other modules even before those load.
_RESERVED = range(1, 5)
_state = {"loaded": False, "rules": None}
_KINDS = {"fixed16": 1, "flagged": 2}


def _builtins() -> None:
    if not _state["loaded"]:
        _state["loaded"] = True
        for mod in _BUILTIN:  # each module registers its layout on import
            importlib.import_module(mod, __package__)


def register_layout(layout: Layout) -> Layout:
    """Add ``layout`` under its version number; returns it.

    Raises ValueError for a version outside 1..14, one already taken or
    belonging to a built-in layout, or an unknown length rule.
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
    """Remove the layout of ``version`` (tests add and remove toy layouts)."""
    _LAYOUTS.pop(int(version), None)
    _state["rules"] = None


def layout_for(version: int) -> Layout:
    """The registered layout of ``version``; ValueError if there is none."""
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
