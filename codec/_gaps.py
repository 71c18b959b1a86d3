"""Gaps in the sensor stream: the ``refuse`` / ``fill`` / ``mark`` policies and the gap-mask frame.

* ``refuse``: a NaN or infinite sample is an input error (the default).
* ``fill``: missing samples are replaced by linear interpolation between the
  nearest known samples of the same channel (held flat at the edges); the
  report says how many.  The receiver cannot tell them from data.
* ``mark``: missing samples are filled the same way for the coder, and a
  *gap-mask frame* tells the receiver which positions were missing, so it
  reproduces them as NaN exactly.  A data frame whose window holds gaps has
  flag bit ``FLAG_GAP_MASK`` set; if its gap-mask frame is lost, the receiver
  marks the whole frame lost rather than hand out interpolated values as data.
  A frame that is all gap sends only its gap-mask frame.

Gap-mask frame (its own frame kind, valid beside any data layout version; the
envelope is the data frames' one, so stream search needs no change)::

    sync(16) | kind(4) = 15 | flags(4) = 0 | length(16) | profile(16) | channel(8)
    | sequence(16) | valid(13) | runs(13) | reserved(30) = 0
    | runs x [start(ib), count_minus_1(ib)] | zero padding to a byte | crc(16)

All fields unsigned, MSB first; ``ib`` is ``index_bits(N)`` as in the data
layout.  Runs are the maximal runs of missing samples among the frame's
``valid`` samples, in increasing order, non-overlapping and not touching.  The
CRC is CRC-16/IBM-3740 over every byte after the sync marker up to the CRC.
"""

from __future__ import annotations

import numpy as np

from ._bits import pack_fields, read_fields
from ._crc import crc16_ibm3740
from ._errors import InputError
from ._layout import GAP_KIND, SYNC, index_bits

__all__ = [
    "GAP_POLICIES",
    "GAP_HEADER_FIELDS",
    "fill_gaps",
    "mask_runs",
    "pack_gap_frame",
    "parse_gap_frame",
]

GAP_POLICIES = ("refuse", "fill", "mark")

#: (field, bits) after the sync marker, in order.
GAP_HEADER_FIELDS: tuple[tuple[str, int], ...] = (
    ("kind", 4), ("flags", 4), ("length", 16), ("profile", 16), ("channel", 8),
    ("sequence", 16), ("valid", 13), ("runs", 13), ("reserved", 30),
)
_GAP_HEADER_BITS = sum(b for _, b in GAP_HEADER_FIELDS)
assert _GAP_HEADER_BITS % 8 == 0
_GAP_HEADER_BYTES = len(SYNC) + _GAP_HEADER_BITS // 8


def fill_gaps(x: np.ndarray, empty: bool = False,
              where: str = "input") -> tuple[np.ndarray, np.ndarray]:
    """Interpolate the non-finite samples of every channel; return ``(filled, missing)``.

    Linear interpolation between the nearest known samples (``numpy.interp``),
    held flat before the first and after the last known sample.  A channel with
    no known sample cannot be filled and raises :class:`InputError`, unless
    ``empty`` (the ``mark`` policy, where such values are never shown) fills it with 0.
    """
    missing = ~np.isfinite(x)
    if not missing.any():
        return x, missing
    out = np.where(missing, 0.0, x)
    pos = np.arange(x.shape[0])
    for c in np.flatnonzero(missing.any(axis=0)):  # loop over channels, each whole-array
        known = ~missing[:, c]
        if not known.any():
            if empty:
                continue
            raise InputError(f"channel {c} has no finite sample at all; nothing to fill from",
                             where)
        out[missing[:, c], c] = np.interp(pos[missing[:, c]], pos[known], x[known, c])
    return out, missing


def mask_runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Starts and lengths of the runs of True in a 1-D boolean ``mask``."""
    edge = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    start = np.flatnonzero(edge == 1)
    stop = np.flatnonzero(edge == -1)
    return start, stop - start


def pack_gap_frame(profile: int, channel: int, sequence: int, valid: int, mask: np.ndarray,
                   n: int) -> bytes:
    """One gap-mask frame for the ``valid`` first positions of ``mask`` (True = missing)."""
    ib = index_bits(n)
    start, count = mask_runs(mask[:valid])
    runs = start.size
    body_bits = _GAP_HEADER_BITS + runs * 2 * ib
    length = len(SYNC) + (body_bits + 7) // 8 + 2
    head = [GAP_KIND, 0, length, profile, channel, sequence % 65536, valid, runs, 0]
    values = np.concatenate([head, np.stack([start, count - 1], axis=1).reshape(-1)])
    widths = np.concatenate([[b for _, b in GAP_HEADER_FIELDS], np.full(2 * runs, ib)])
    body = pack_fields(values.astype(np.uint64), widths).tobytes()
    return SYNC + body + crc16_ibm3740(body).to_bytes(2, "big")


def parse_gap_frame(frame: bytes, n: int) -> tuple[dict, np.ndarray] | str:
    """Header and mask (length ``valid``) of a CRC-checked gap-mask frame, or why it is refused.

    Every count read from the wire is bounded before use: ``valid`` by N, the
    number of runs by what N allows and by the frame's own length, each run by
    ``valid`` and by the previous run.
    """
    if len(frame) < _GAP_HEADER_BYTES + 2:
        return "gap frame shorter than its header"
    buf = np.frombuffer(frame, dtype=np.uint8)
    widths = np.array([b for _, b in GAP_HEADER_FIELDS])
    pos = np.cumsum(widths) - widths + 8 * len(SYNC)
    vals = read_fields(buf, pos, widths)
    head = {name: int(v) for (name, _), v in zip(GAP_HEADER_FIELDS, vals)}
    ib = index_bits(n)
    if head["flags"] or head["reserved"]:
        return "gap frame with reserved bits set"
    if not 1 <= head["valid"] <= n:
        return f"gap frame claims {head['valid']} valid samples; a frame holds 1 to {n}"
    runs = head["runs"]
    if runs > (head["valid"] + 1) // 2:
        return f"gap frame claims {runs} runs in {head['valid']} samples"
    want = len(SYNC) + (_GAP_HEADER_BITS + runs * 2 * ib + 7) // 8 + 2
    if head["length"] != want or len(frame) != want:
        return "gap frame length does not match its run count"
    rpos = 8 * _GAP_HEADER_BYTES + np.arange(2 * runs) * ib
    rv = read_fields(buf, rpos, np.full(2 * runs, ib)).reshape(runs, 2)
    start, count = rv[:, 0], rv[:, 1] + 1
    stop = start + count
    if runs and (stop[-1] > head["valid"] or (start[1:] <= stop[:-1]).any()):
        return "gap frame runs overlap, touch or pass the valid samples"
    mask = np.zeros(head["valid"], dtype=bool)
    cover = np.repeat(start - (np.cumsum(count) - count), count) + np.arange(int(count.sum()))
    mask[cover] = True
    return head, mask
