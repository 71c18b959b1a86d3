"""Gaps in the sensor stream: the ``refuse`` / ``fill`` / ``mark`` policies and the gap-mask frame.

* ``refuse``: a NaN or infinite sample is an input error (the default).
* ``fill``: missing samples are replaced by linear interpolation between the
  nearest known samples of the same channel (held flat at the edges); the
  report says how many.  The receiver cannot tell them from data.
* ``mark``: missing samples are filled the same way for the coder, and the
  receiver is told which positions were missing, so it reproduces them as NaN
  exactly.  A data frame holding gaps travels *inside* a gap-mask frame, with
  the runs of missing samples of all its windows and channels: mask and data
  arrive together or not at all, so the receiver can never hand out
  interpolated values as data.  Data frames keep their normal grouping (and
  the frame-scope budget), so marking costs the wrapper and the runs only.
  This works beside every data layout version (the inner frame is a data
  frame of any version).

Gap-mask frame, format 1 (its own frame kind; the envelope rule knows its length field)::

    sync(16) | kind(4) = 15 | format(4) = 1 | length(16)
    | inner: the data frame's bytes after its sync marker, without its CRC
    | runs_minus_1 (EG0) | runs x [start(sb) | count_minus_1 (EG0)]
    | zero padding to a byte | crc(16)

All fields unsigned, MSB first; EG0 is order-0 exponential Golomb.
``length`` counts the whole gap-mask frame, sync to CRC.  The inner frame's
own length field (the frame as it would travel alone, with sync and CRC)
says where it ends.  The runs index the inner frame's samples: its
subframes in the order the frame carries them, each contributing its valid
samples, P in all; ``sb`` = ``bit_length(P - 1)``.  Runs are maximal
(increasing, neither overlapping nor touching) and may cross window and
channel boundaries.  The CRC is CRC-16/IBM-3740 over the implicit profile
prefix (``FrameKey``) then every byte after the sync marker up to the CRC;
it is the only CRC of the frame: the inner frame travels without its sync
marker and CRC, so no part of a damaged gap-mask frame can pass for a data
frame on its own.
"""

from __future__ import annotations

import numpy as np

from .._errors import InputError
from ..entropy.bits import BitReader, pack_fields
from ..entropy.rice import exp_golomb_fields, read_unary
from .crc import crc16_ibm3740
from .envelope import GAP_KIND, SYNC, frame_extent

__all__ = [
    "GAP_POLICIES",
    "GAP_FORMAT",
    "MAX_GAP_FRAME_BYTES",
    "fill_gaps",
    "mask_runs",
    "pack_gap_frame",
    "unwrap_gap_frame",
    "read_gap_runs",
]

GAP_POLICIES = ("refuse", "fill", "mark")

#: The format nibble after the kind: 1 wraps one whole data frame (0 was the older
#: one-window format with a fixed header, no longer written or read).
GAP_FORMAT = 1
#: Bytes before the inner frame: sync, kind and format, length.
_GAP_HEAD_BYTES = len(SYNC) + 3
_CRC_BYTES = 2
#: Frames this long do not fit the 16-bit length field.
MAX_GAP_FRAME_BYTES = 65535


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


def pack_gap_frame(frame: bytes, missing: np.ndarray, key) -> bytes:
    """The gap-mask frame wrapping data ``frame`` whose samples ``missing`` marks (True = gap).

    ``frame`` is one complete data frame (sync to CRC) of any layout version;
    ``missing`` has one entry per sample it carries, subframe by subframe in
    the frame's order, each subframe's valid samples only.  ``key``
    (:class:`codec.layouts.envelope.FrameKey`) is the profile's share of the CRC.
    Raises :class:`InputError` when the result would not fit the 16-bit length.
    """
    start, count = mask_runs(np.asarray(missing, dtype=bool))
    if not start.size:
        raise ValueError("a gap-mask frame needs at least one missing sample")
    sb = int(missing.size - 1).bit_length()
    eg_r = exp_golomb_fields(np.array([start.size - 1]))
    eg_c = exp_golomb_fields(count - 1)
    values = np.concatenate([eg_r[0], np.stack(
        [start.astype(np.uint64), eg_c[0][0::2], eg_c[0][1::2]], axis=1).reshape(-1)])
    widths = np.concatenate([eg_r[1], np.stack(
        [np.full(start.size, sb), eg_c[1][0::2], eg_c[1][1::2]], axis=1).reshape(-1)])
    runs = pack_fields(values, widths).tobytes()
    inner = bytes(frame[len(SYNC) : -_CRC_BYTES])
    length = _GAP_HEAD_BYTES + len(inner) + len(runs) + _CRC_BYTES
    if length > MAX_GAP_FRAME_BYTES:
        raise InputError(f"a data frame with gaps would need a {length}-byte gap-mask frame "
                         f"(at most {MAX_GAP_FRAME_BYTES}); use fewer windows per frame or "
                         "one channel per frame with --gaps mark", "profile")
    body = bytes([(GAP_KIND << 4) | GAP_FORMAT]) + length.to_bytes(2, "big") + inner + runs
    return SYNC + body + crc16_ibm3740(key.prefix(length) + body).to_bytes(2, "big")


def unwrap_gap_frame(frame: bytes) -> tuple[bytes, int] | str:
    """The inner data frame of a CRC-checked gap-mask frame and the bit where its runs start.

    The inner frame comes back whole, as it would travel alone, its CRC field
    zero (nothing checks it: the gap-mask frame's CRC covers it).  Returns a
    string saying why when the frame is refused: a format other than 1, a
    length field that is not the frame's size, inner bytes that are not one
    data frame (of a known version, not itself a gap-mask frame) ending
    before the runs.
    """
    size = len(frame)
    if size < _GAP_HEAD_BYTES + _CRC_BYTES + 3:
        return "gap frame shorter than its header"
    if frame[len(SYNC)] & 0x0F != GAP_FORMAT:
        return f"gap frame of format {frame[len(SYNC)] & 0x0F}; this decoder reads format 1"
    if int.from_bytes(frame[3:5], "big") != size:
        return "gap frame length field does not match its size"
    rest = SYNC + bytes(frame[_GAP_HEAD_BYTES : size - _CRC_BYTES])
    if rest[len(SYNC)] >> 4 == GAP_KIND:
        return "gap frame wraps a gap frame"
    inner_len = frame_extent(memoryview(rest), 0)
    # the inner frame alone is sync + body + CRC; the runs take at least one byte after it
    if inner_len is None or inner_len - _CRC_BYTES >= len(rest):
        return "gap frame's inner bytes are not one data frame followed by runs"
    inner = rest[: inner_len - _CRC_BYTES] + bytes(_CRC_BYTES)
    return inner, 8 * (_GAP_HEAD_BYTES + inner_len - len(SYNC) - _CRC_BYTES)


def read_gap_runs(frame: bytes, bit: int, samples: int) -> np.ndarray | str:
    """The missing-sample mask (``samples`` long) coded from ``bit`` to the CRC of ``frame``.

    Every count read from the wire is bounded before use: the run count by
    what ``samples`` allows and by the bits left, each run's length by
    ``samples``; runs must increase without overlapping or touching, end
    inside the samples, and the runs with their zero padding must fill the
    frame exactly.  Returns a string saying why when they do not.
    """
    limit = 8 * (len(frame) - _CRC_BYTES)  # bits before the CRC
    if samples < 1:
        return "gap frame wraps a frame without samples"
    sb = int(samples - 1).bit_length()
    cap = int(samples).bit_length()  # an EG0 prefix longer than this codes a count > samples
    rd = BitReader(frame)
    z = int(read_unary(rd, np.array([bit]), cap)[0])
    if z > cap or bit + 2 * z + 1 > limit:
        return "gap frame claims more runs than its samples allow"
    runs = int(rd.read(np.array([bit + z]), z + 1)[0])  # runs - 1 + 1
    bit += 2 * z + 1
    if runs > (samples + 1) // 2 or bit + runs * (sb + 1) > limit:
        return f"gap frame claims {runs} runs in {samples} samples"
    start = np.zeros(runs, np.int64)
    count = np.zeros(runs, np.int64)
    for i in range(runs):  # bounded above by the bits left; each run reads two fields
        start[i] = rd.read(np.array([bit]), sb)[0]
        bit += sb
        z = int(read_unary(rd, np.array([bit]), cap)[0])
        if z > cap or bit + 2 * z + 1 > limit:
            return "gap frame run longer than its samples"
        count[i] = rd.read(np.array([bit + z]), z + 1)[0]
        bit += 2 * z + 1
    stop = start + count
    if stop[-1] > samples or (start[1:] <= stop[:-1]).any():
        return "gap frame runs overlap, touch or pass the frame's samples"
    if limit - bit >= 8 or (limit > bit and rd.read(np.array([bit]), limit - bit)[0]):
        return "gap frame runs do not fill it up to its zero padding"
    mask = np.zeros(samples, dtype=bool)
    cover = np.repeat(start - (np.cumsum(count) - count), count) + np.arange(int(count.sum()))
    mask[cover] = True
    return mask
