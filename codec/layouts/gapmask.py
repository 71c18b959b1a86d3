"""Gaps in the sensor stream: the ``refuse`` / ``fill`` / ``mark`` policies and the gap-mask frame.

* ``refuse``: a NaN or infinite sample is an input error (the default).
* ``fill``: missing samples are replaced by linear interpolation between the
  nearest known samples of the same channel (held flat at the edges); the
  report says how many.  The receiver cannot tell them from data.
* ``mark``: missing samples are filled the same way for the coder, and the
  receiver is told which positions were missing, so it reproduces them as NaN
  exactly.  A data frame whose window holds gaps travels *inside* a gap-mask
  frame, with the masks of its channels: mask and data arrive together or not
  at all, so the receiver can never hand out interpolated values as data.  A
  window that is all gap sends the gap-mask frame alone.  This works beside
  every data layout version (the inner frame is a whole frame of any version).

Gap-mask frame (its own frame kind; the envelope rule knows its length field)::

    sync(16) | kind(4) = 15 | flags(4) = 0 | length(16) | profile(16)
    | sequence(16) | valid(13) | masks(9) | reserved(2) = 0
    | masks x [channel(8) | runs(13) | runs x [start(ib), count_minus_1(ib)]]
    | zero padding to a byte | inner frame (0 or more bytes) | crc(16)

All fields unsigned, MSB first.  ``length`` counts the whole frame, sync to
CRC; ``profile`` is the full 16-bit profile identifier; ``sequence`` the time
window modulo 65 536; ``valid`` the real samples of the window; ``ib`` is
``index_bits(N)`` as in the data layout.  Runs are the maximal runs of missing
samples among the ``valid`` samples of that channel, increasing, neither
overlapping nor touching.  The inner frame, when present, is one complete data
frame (its own sync marker and CRC) of the same window.  The CRC is
CRC-16/IBM-3740 over the implicit profile prefix (``FrameKey``) then every
byte after the sync marker up to the CRC.
"""

from __future__ import annotations

import numpy as np

from .._errors import InputError
from ..entropy.bits import pack_fields, read_fields
from .crc import crc16_ibm3740
from .v1v2 import GAP_KIND, SYNC, index_bits

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
    ("kind", 4), ("flags", 4), ("length", 16), ("profile", 16), ("sequence", 16),
    ("valid", 13), ("masks", 9), ("reserved", 2),
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


def pack_gap_frame(profile: int, sequence: int, valid: int,
                   masks: list[tuple[int, np.ndarray]], inner: bytes, n: int, key) -> bytes:
    """One gap-mask frame: ``(channel, mask)`` pairs (True = missing) and the inner data frame.

    ``inner`` is the complete data frame of the same window (empty when every
    sample of the window is a gap).  ``key`` (:class:`codec.layouts.v1v2.FrameKey`)
    is the profile's share of the CRC.
    """
    ib = index_bits(n)
    values: list = []
    widths: list = []
    for channel, mask in masks:
        start, count = mask_runs(np.asarray(mask[:valid], dtype=bool))
        values += [channel, start.size]
        widths += [8, 13]
        values += np.stack([start, count - 1], axis=1).reshape(-1).tolist()
        widths += [ib] * (2 * start.size)
    body_bits = _GAP_HEADER_BITS + int(sum(widths))
    length = len(SYNC) + (body_bits + 7) // 8 + len(inner) + 2
    head = [GAP_KIND, 0, length, profile, sequence % 65536, valid, len(masks), 0]
    fields = pack_fields(np.array(head + values, dtype=np.uint64),
                         np.array([b for _, b in GAP_HEADER_FIELDS] + widths))
    body = fields.tobytes() + inner
    return SYNC + body + crc16_ibm3740(key.prefix(length) + body).to_bytes(2, "big")


def parse_gap_frame(frame: bytes, n: int, channels: int
                    ) -> tuple[dict, list[tuple[int, np.ndarray]], bytes] | str:
    """Header, ``(channel, mask)`` pairs and inner frame of a CRC-checked gap-mask frame.

    Returns a string saying why when the frame is refused.  Every count read
    from the wire is bounded before use: ``valid`` by N, the number of masks by
    the profile's channels, each run count by what ``valid`` allows, and the
    bits they imply by the frame's own length; runs are checked for order and
    range, channels for range and repeats.
    """
    size = len(frame)
    if size < _GAP_HEADER_BYTES + 2:
        return "gap frame shorter than its header"
    buf = np.frombuffer(frame, dtype=np.uint8)
    widths = np.array([b for _, b in GAP_HEADER_FIELDS])
    pos = np.cumsum(widths) - widths + 8 * len(SYNC)
    head = {name: int(v) for (name, _), v in zip(GAP_HEADER_FIELDS, read_fields(buf, pos, widths))}
    ib = index_bits(n)
    if head["flags"] or head["reserved"]:
        return "gap frame with reserved bits set"
    if head["length"] != size:
        return "gap frame length field does not match its size"
    valid = head["valid"]
    if not 1 <= valid <= n:
        return f"gap frame claims {valid} valid samples; a frame holds 1 to {n}"
    if not 1 <= head["masks"] <= channels:
        return f"gap frame claims {head['masks']} masks for {channels} channels"
    limit = 8 * (size - 2)  # bits before the CRC
    bit = 8 * _GAP_HEADER_BYTES
    out: list[tuple[int, np.ndarray]] = []
    seen: set[int] = set()
    for _ in range(head["masks"]):  # at most `channels` iterations, each bounded below
        if bit + 21 > limit:
            return "gap frame masks run past its end"
        ch, runs = (int(v) for v in read_fields(buf, np.array([bit, bit + 8]), np.array([8, 13])))
        bit += 21
        if ch >= channels or ch in seen:
            return f"gap frame mask for channel {ch} is out of range or repeated"
        seen.add(ch)
        if runs < 1 or runs > (valid + 1) // 2 or bit + 2 * ib * runs > limit:
            return f"gap frame claims {runs} runs in {valid} samples"
        rv = read_fields(buf, bit + np.arange(2 * runs) * ib, np.full(2 * runs, ib))
        bit += 2 * ib * runs
        start, count = rv[0::2], rv[1::2] + 1
        stop = start + count
        if stop[-1] > valid or (start[1:] <= stop[:-1]).any():
            return "gap frame runs overlap, touch or pass the valid samples"
        mask = np.zeros(valid, dtype=bool)
        cover = np.repeat(start - (np.cumsum(count) - count), count) + np.arange(int(count.sum()))
        mask[cover] = True
        out.append((ch, mask))
    inner_at = (bit + 7) // 8
    if read_fields(buf, np.array([bit]), np.array([8 * inner_at - bit]))[0] != 0:
        return "gap frame padding is not zero"
    return head, out, bytes(frame[inner_at : size - 2])
