"""Frame layouts 3 and 4: several windows per frame, range-coded coefficients.

Version 4 is version 3 bit for bit except the version field and one more
subframe-header bit after the count: 1 when the subframe's integers are
levels of dependent (trellis-coded) quantization (:mod:`codec.quantize.trellis`),
whose range-coder contexts also name the quantizer each level belongs to;
0 for the scalar quantizer of version 3.

Written down bit by bit in ``FRAME_LAYOUT.md`` ("Version 3").  A frame::

    sync(16) | version(4)=3 long(1) length(11 or 27) profile(8) sequence(8)
    windows-1(4) multi(1) [channel(cb) if multi = 0] short(1) [valid-1(ib) if short]
    [mean_change(1) if windows > 1 and reference ac] [count_change(1) if windows > 1]
    | per subframe: step(10, or exp-Golomb of the zigzag change) [mean: exp-Golomb
      of zigzag, reference ac] count(bit_length(N)) [quantizer(1), version 4]
    | zero padding to a byte | range-coded coefficients of every subframe | crc(16)

Subframes come window by window (the ``windows`` consecutive windows from
``sequence``), and inside a window channel by channel (every channel of the
profile when multi = 1, else the one ``channel``).  ``short`` marks that the
frame's last window is a short last window.  ``cb = bit_length(channels - 1)``.
With ``mean_change`` (``count_change``) set, every subframe after a
channel's first one in the frame sends its mean (count) as the exp-Golomb
code of the zigzag change from that channel's previous window in the frame.
The coefficients are one range-coded lane (:mod:`codec.entropy.rangecoder`) running from
the first byte after the padding to the CRC; bytes past its end read as zero.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..entropy.bits import BitReader, pack_fields
from ..entropy.rangecoder import coefficient_ops, decode_coefficients, encode_lanes
from ..entropy.rice import exp_golomb_bits, zigzag
from .v1v2 import (
    CRC_BYTES,
    LONG_LENGTH_BITS,
    SHORT_LENGTH_BITS,
    SYNC,
    FrameBatchV2,
    FrameKey,
    count_bits,
    index_bits,
    read_frame_start,
    read_subheaders,
    size_length_fields,
    subframes_fit,
    wrap_frames,
    write_frame_heads,
    write_subheaders,
)

__all__ = [
    "LAYOUT_VERSION_3",
    "LAYOUT_VERSION_4",
    "MAX_WINDOWS",
    "MIN_V3_BYTES",
    "FrameBatchV3",
    "pack_frames_v3",
    "parse_frames_v3",
    "channel_bits",
]

LAYOUT_VERSION_3 = 3
#: Version 4: version 3 with levels of dependent quantization (``codec.quantize.trellis``).
LAYOUT_VERSION_4 = 4
WINDOW_BITS = 4
#: Most windows one frame carries.
MAX_WINDOWS = 1 << WINDOW_BITS
#: Smallest possible v3 frame: sync, 4 header bytes, CRC.
MIN_V3_BYTES = len(SYNC) + 4 + CRC_BYTES


def channel_bits(channels: int) -> int:
    """Bits of the channel field of a single-channel frame."""
    return int(max(channels, 1) - 1).bit_length()


@dataclass
class FrameBatchV3(FrameBatchV2):
    """Frames of layout v3: the v2 arrays plus ``windows`` per frame.

    Per frame: ``multi``, ``channel`` (when not multi), ``sequence`` (first
    window), ``windows`` (1..16), ``valid`` (real samples of the last window).
    Per subframe (rows of ``q``, grouped by frame in order): ``frame``,
    ``step_code``, ``mean`` (or None).
    """

    windows: np.ndarray
    #: Layout 4: per subframe, 1 where the levels are of dependent quantization.
    quantizer: np.ndarray | None = None


def _counts(q: np.ndarray) -> np.ndarray:
    nz = q != 0
    return np.where(nz.any(axis=1), q.shape[1] - np.argmax(nz[:, ::-1], axis=1), 0)


def _predictions(mean: np.ndarray | None, count: np.ndarray, prev: np.ndarray,
                 has_prev: np.ndarray, owner: np.ndarray, nf: int, lb: int
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, np.ndarray]:
    """Per frame, whether mean and count go as changes from the previous window.

    A frame sends its later windows' means (and, separately, counts) as
    changes from the same channel's previous window in the frame when that
    codes the frame's fields in fewer bits; measured on real recordings the
    mean of a slow signal moves little from one window to the next, while the
    mean of a signal centred on zero is cheaper sent whole.  Returns the two
    per-frame flags, the mean fields to send (None without means) and the
    zigzag of each count's change.
    """
    def per_frame(bits):
        return np.bincount(owner, bits, minlength=nf)

    cz = zigzag(count - count[prev])
    count_pred = per_frame(np.where(has_prev, exp_golomb_bits(cz), lb)) < per_frame(
        np.full(count.size, lb))
    if mean is None:
        return np.zeros(nf, bool), count_pred, None, cz
    delta = np.where(has_prev, mean - mean[prev], mean)
    mean_pred = per_frame(exp_golomb_bits(zigzag(delta))) < per_frame(
        exp_golomb_bits(zigzag(mean)))
    return mean_pred, count_pred, np.where(mean_pred[owner], delta, mean), cz


def pack_frames_v3(batch: FrameBatchV3, profile_id: int, n: int, channels: int,
                   version: int = LAYOUT_VERSION_3, *, key: FrameKey
                   ) -> tuple[bytes, np.ndarray, np.ndarray, np.ndarray]:
    """Pack every frame of ``batch`` in layout v3, or v4 (``version`` 4: the
    rows of ``batch.q`` are levels of dependent quantization).

    Returns the bytes, each frame's byte length, each subframe's header bits
    (step, mean, count) and each frame's range-coded bytes.
    """
    nf = len(batch)
    q = batch.q
    ns = q.shape[0]
    vb = index_bits(n)
    cb = channel_bits(channels)
    count = _counts(q)
    v4 = version == LAYOUT_VERSION_4
    quant = (np.zeros(ns, dtype=bool) if batch.quantizer is None
             else batch.quantizer.astype(bool)) if v4 else None
    cum, freq, shift, row = coefficient_ops(q, count, trellis=quant,
                                            mean=batch.mean is not None)
    lane_bytes, lane_len = encode_lanes(cum, freq, shift, batch.frame[row], nf)

    first = np.flatnonzero(np.r_[True, batch.frame[1:] != batch.frame[:-1]])
    lastrow = np.r_[first[1:] - 1, ns - 1]
    nh, nsub = 12, 5 if v4 else 4
    slots = nh + nsub + 1
    val = np.zeros((ns, slots), dtype=np.uint64)
    wid = np.zeros((ns, slots), dtype=np.int64)
    lead = np.zeros(ns, dtype=bool)
    lead[first] = True
    # later windows of a channel in a frame may send mean and count as changes
    # from that channel's previous window in the frame (flags in the frame header)
    owner = np.repeat(np.arange(nf), np.diff(np.r_[first, ns]))
    per_win = np.where(batch.multi.astype(bool), channels, 1)[owner]
    has_prev = np.arange(ns) - first[owner] >= per_win
    prev = np.where(has_prev, np.arange(ns) - per_win, 0)
    mean_pred, count_pred, mean_sent, count_delta = _predictions(
        batch.mean, count, prev, has_prev, owner, nf, count_bits(n))
    write_subheaders(val, wid, nh, lead, batch.step_code, mean_sent, count, count_bits(n),
                     quant)
    cp = count_pred[owner] & has_prev
    val[:, nh + 3] = np.where(cp, count_delta + 1, count).astype(np.uint64)
    wid[:, nh + 3] = np.where(cp, exp_golomb_bits(count_delta), count_bits(n))
    sub_bits = wid[:, nh:].sum(axis=1)

    short = batch.valid < n
    multi = batch.multi.astype(bool)
    several = batch.windows > 1
    mean_flag = several & (batch.mean is not None)
    head_bits = (4 + 1 + 8 + 8 + WINDOW_BITS + 1 + np.where(multi, 0, cb) + 1
                 + np.where(short, vb, 0) + mean_flag + several)
    payload = np.add.reduceat(sub_bits, first)
    long, bits, head_bytes, length = size_length_fields(head_bits + payload, lane_len)
    head = [(version, 4), (long, 1),
            (length, np.where(long, LONG_LENGTH_BITS, SHORT_LENGTH_BITS)),
            (profile_id & 0xFF, 8), (batch.sequence % 256, 8), (batch.windows - 1, WINDOW_BITS),
            (multi, 1), (np.where(multi, 0, batch.channel), np.where(multi, 0, cb)),
            (short, 1), (np.where(short, batch.valid - 1, 0), np.where(short, vb, 0)),
            (mean_pred & mean_flag, mean_flag.astype(np.int64)),
            (count_pred & several, several.astype(np.int64))]
    write_frame_heads(val, wid, first, lastrow, head, head_bytes * 8 - bits)
    heads = pack_fields(val.ravel(), wid.ravel())

    # frame = sync | header bytes | lane bytes | crc
    body_bytes = head_bytes + lane_len
    bstart = np.cumsum(body_bytes) - body_bytes
    body = np.empty(int(body_bytes.sum()), dtype=np.uint8)
    hstart = np.cumsum(head_bytes) - head_bytes
    body[np.repeat(bstart - hstart, head_bytes) + np.arange(heads.size)] = heads
    lstart = np.cumsum(lane_len) - lane_len
    body[np.repeat(bstart + head_bytes - lstart, lane_len) + np.arange(lane_bytes.size)] = \
        lane_bytes
    out = wrap_frames(body, body_bytes, key)
    if out.size != int(length.sum()):
        raise RuntimeError("v3 frames differ from their length fields")  # our bug
    return out.tobytes(), length, sub_bits, lane_len


def parse_frames_v3(data: bytes, offsets: np.ndarray, lengths: np.ndarray, n: int,
                    channels: int, has_mean: bool, version: int = LAYOUT_VERSION_3
                    ) -> dict[str, np.ndarray]:
    """Parse CRC-checked v3 (or, with ``version`` 4, v4) frames at ``offsets``.

    Returns per-frame ``profile``, ``sequence``, ``multi``, ``valid``, ``length``,
    ``consumed_ok`` and per-subframe ``frame``, ``channel``, ``window_offset``
    (window index relative to the frame's ``sequence``), ``sub_valid``,
    ``step_code``, ``mean`` (or None), ``count``, ``q``, ``trellis`` (layout
    4: whether the subframe's levels are of dependent quantization; else
    None), and per frame ``mean_pred`` / ``count_pred`` (whether later
    windows send their mean / count as a change from the previous window).
    ``consumed_ok`` is False for a frame whose contents do not match its
    length.
    """
    r = BitReader(data)
    nf = offsets.size
    vb = index_bits(n)
    lb = count_bits(n)
    cb = channel_bits(channels)
    offsets = offsets.astype(np.int64)
    length, profile, sequence, p = read_frame_start(r, offsets)
    windows = r.read(p, WINDOW_BITS) + 1
    p = p + WINDOW_BITS
    multi = r.read(p, 1).astype(bool)
    p = p + 1
    channel = r.read(p, np.where(multi, 0, cb))
    p = p + np.where(multi, 0, cb)
    short = r.read(p, 1).astype(bool)
    valid = np.where(short, r.read(p + 1, np.where(short, vb, 0)) + 1, n)
    p = p + 1 + np.where(short, vb, 0)
    several = windows > 1
    mean_flag = several & has_mean
    mean_pred = r.read(p, mean_flag.astype(np.int64)).astype(bool)
    p = p + mean_flag
    count_pred = r.read(p, several.astype(np.int64)).astype(bool)
    p = p + several

    per_win = np.where(multi, channels, 1)
    cnt = windows * per_win
    # Before anything is allocated: a frame whose header claims more subframes than its
    # own bytes can hold (each subframe header takes at least min_subframe_bits) is
    # refused and gets no rows, so the work and memory per frame follow its length.
    fits = subframes_fit(cnt, p - offsets * 8, lengths, n, has_mean,
                         version == LAYOUT_VERSION_4, count_pred)
    cnt = np.where(fits, cnt, 0)
    ns = int(cnt.sum())
    sstart = np.cumsum(cnt) - cnt
    owner = np.repeat(np.arange(nf), cnt)
    slot = np.arange(ns) - sstart[owner]
    woff = slot // per_win[owner]
    sub_channel = np.where(multi[owner], slot % per_win[owner], channel[owner])
    sub_valid = np.where(woff == windows[owner] - 1, valid[owner], n)
    step = np.zeros(ns, np.int64)
    mean = np.zeros(ns, np.int64) if has_mean else None
    count = np.zeros(ns, np.int64)
    quant = np.zeros(ns, np.int64) if version == LAYOUT_VERSION_4 else None
    ok = fits.copy()
    for s in range(int(cnt.max(initial=0))):
        fr = np.flatnonzero(cnt > s)
        rows = sstart[fr] + s
        pw = per_win[fr]
        later = s >= pw
        p[fr], bad = read_subheaders(r, p[fr], rows, s, step, mean, count, lb, n, quant,
                                      later & mean_pred[fr], later & count_pred[fr],
                                      np.where(later, rows - pw, rows))
        ok[fr] &= ~bad
    start = offsets + (p - offsets * 8 + 7) // 8
    end = offsets + lengths - CRC_BYTES
    ok &= (start <= end) & (length == lengths)
    start = np.minimum(start, end)
    buf = np.frombuffer(data, dtype=np.uint8)
    trellis = None if quant is None else quant.astype(bool)
    q, bad, reads = decode_coefficients(buf, start, end, owner, count, n, trellis=trellis,
                                        mean=has_mean)
    # the lane must be used: no byte past what the decoder read, and no trailing zero byte
    lane_len = end - start
    last = buf[np.maximum(end - 1, 0)]
    ok &= ~bad & (lane_len <= reads + 1) & ((lane_len == 0) | (last != 0))
    return {"profile": profile, "sequence": sequence, "multi": multi, "valid": valid,
            "length": length, "consumed_ok": ok, "frame": owner, "channel": sub_channel,
            "window_offset": woff, "sub_valid": sub_valid, "windows": windows,
            "step_code": step, "mean": mean, "count": count, "q": q, "trellis": trellis,
            "mean_pred": mean_pred, "count_pred": count_pred}
