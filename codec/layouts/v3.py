"""Frame layout version 3: several windows per frame, range-coded coefficients (the default).

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

Layout 4 (:mod:`codec.layouts.v4`) is this layout with a quantizer bit per
subframe; the routines here take it as the ``quantizer_bit`` switch.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..entropy.bits import BitReader, bit_length, pack_fields
from ..entropy.rangecoder import (
    coefficient_ops,
    decode_coefficients,
    encode_lanes,
    zero_tail_bits,
)
from ..entropy.rice import exp_golomb_bits, zigzag
from ..quantize.select import choose_steps
from ..transform.bases import has_alternate_basis
from ..transform.predict import lag_bits, predictable
from .envelope import CRC_BYTES, LONG_LENGTH_BITS, SHORT_LENGTH_BITS, SYNC, FrameKey, wrap_frames
from .fields import header_bits, header_slots, read_header
from .registry import (
    CodedFrames,
    LengthField,
    PackedFrames,
    ParseContext,
    ParsedFrames,
    Verdicts,
    register_layout,
)
from .subframes import (
    count_bits,
    length_width,
    parse_checked,
    parsed_frames,
    read_subheaders,
    refuse_contents,
    size_length_fields,
    subframes_fit,
    write_frame_heads,
    write_subheaders,
)
from .v1 import index_bits, max_frame_bytes_for
from .v2 import PACK_BLOCK

__all__ = [
    "LAYOUT_VERSION_3",
    "HEADER_FIELDS_V3",
    "HEADER_FIELDS_V5",
    "FrameBatchV3",
    "Layout3",
    "LAYOUT_3",
    "RD_OFFSET_V3",
    "pack_frames_v3",
    "parse_frames_v3",
    "channel_bits",
]

LAYOUT_VERSION_3 = 3
#: Layout 5: bits of the frame's exp-Golomb order of its mean fields (orders 0 to 15).
MEAN_ORDER_BITS = 4
#: The other versions these routines serve and what each adds to version 3's subframes:
#: 4 the quantizer bit (:mod:`codec.layouts.v4`), 5 the prediction fields
#: (:mod:`codec.layouts.v5`), 6 those and the basis switch (:mod:`codec.layouts.v6`), 7
#: those, a flag per channel and frame dropping the count fields and a range-coded string
#: per channel of a multi-channel frame (:mod:`codec.layouts.v7`).
QUANTIZER_BIT_VERSION, PREDICTION_VERSION, SWITCH_VERSION, STRINGS_VERSION = 4, 5, 6, 7
WINDOW_BITS = 4
#: Smallest possible v3 frame: sync, 4 header bytes, CRC.
MIN_V3_BYTES = len(SYNC) + 4 + CRC_BYTES
#: The one rounding offset (a slightly widened dead zone).  With the rest of each budget
#: spent by zeroing +-1 codes (spend_slack), one offset does as well as trying two:
#: measured in FRAME_LAYOUT.md.
RD_OFFSET_V3 = 0.42


def channel_bits(channels: int) -> int:
    """Bits of the channel field of a single-channel frame."""
    return int(max(channels, 1) - 1).bit_length()


def _several(h, ctx):
    return h["windows_minus_1"] > 0


#: (field, bits, meaning) of the frame header after the sync marker (layouts 3 and 4;
#: layout 5 adds three fields, HEADER_FIELDS_V5);
#: ``bits`` may be a function of the fields before it (:mod:`codec.layouts.fields`).
HEADER_FIELDS_V3 = (
    ("version", 4, "frame layout version (3 to 7)"),
    ("long", 1, "0: the length field has 11 bits; 1: 27 bits"),
    ("length", length_width, "bytes in the whole frame, sync marker to CRC"),
    ("profile", 8, "low byte of the 16-bit profile identifier"),
    ("sequence", 8, "index, modulo 256, of the frame's first window"),
    ("windows_minus_1", WINDOW_BITS, "the frame carries 1..16 consecutive windows"),
    ("multi", 1, "1: every channel of the profile in each window; 0: one channel"),
    ("channel", lambda h, c: np.where(h["multi"], 0, channel_bits(c.channels)),
     "channel index (when multi = 0)"),
    ("short", 1, "1: the frame's last window is a short last window"),
    ("valid_minus_1", lambda h, c: np.where(h["short"], index_bits(c.n), 0),
     "real samples in that window minus one (when short = 1)"),
    ("mean_change", lambda h, c: _several(h, c) & c.has_mean,
     "1: later windows send their mean as a change (when windows > 1, reference ac)"),
    ("count_change", _several, "1: later windows send their count as a change (windows > 1)"),
)

#: Layouts 5 to 7: layout 3's header and three more fields (:mod:`codec.layouts.v5`; layout
#: 7's own fields are in its subframes).
HEADER_FIELDS_V5 = HEADER_FIELDS_V3 + (
    ("predict", _several,
     "1: subframes carry long-term prediction fields (when windows > 1, layouts 5 to 7)"),
    ("one_step", _several,
     "1: later windows repeat their channel's step and send none (windows > 1, layouts 5 to 7)"),
    ("mean_order", lambda h, c: np.where(c.has_mean, MEAN_ORDER_BITS, 0),
     "order k of the exp-Golomb codes of the mean fields (reference ac, layouts 5 to 7)"),
)


@dataclass(frozen=True)
class FrameBatchV3:
    """Frames of layouts 3 and 4 as parallel arrays.

    Per frame: ``multi``, ``channel`` (when not multi), ``sequence`` (first
    window), ``windows`` (1..16), ``valid`` (real samples of the last window).
    Per subframe (rows of ``q``, grouped by frame in order): ``frame``,
    ``step_code``, ``mean`` (or None), for layout 4 ``quantizer`` (1 where
    the levels are of dependent quantization), for layouts 5 to 7 ``lag``,
    and for layouts 6 and 7 ``alternate`` (1 where the row is on the alternate basis;
    None where the profile's basis has none, and then no field is sent).
    """

    multi: np.ndarray
    channel: np.ndarray
    sequence: np.ndarray
    windows: np.ndarray
    valid: np.ndarray
    frame: np.ndarray
    step_code: np.ndarray
    mean: np.ndarray | None
    q: np.ndarray
    quantizer: np.ndarray | None = None
    lag: np.ndarray | None = None
    alternate: np.ndarray | None = None

    def __len__(self) -> int:
        return int(self.multi.size)


def _counts(q: np.ndarray) -> np.ndarray:
    nz = q != 0
    return np.where(nz.any(axis=1), q.shape[1] - np.argmax(nz[:, ::-1], axis=1), 0)


def _predictions(mean: np.ndarray | None, count: np.ndarray, prev: np.ndarray,
                 has_prev: np.ndarray, owner: np.ndarray, nf: int, lb: int,
                 counts_sent: np.ndarray | None = None
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, np.ndarray]:
    """Per frame, whether mean and count go as changes from the previous window.

    A frame sends its later windows' means (and, separately, counts) as
    changes from the same channel's previous window in the frame when that
    codes the frame's fields in fewer bits; measured on real recordings the
    mean of a slow signal moves little from one window to the next, while the
    mean of a signal centred on zero is cheaper sent whole.  ``counts_sent``
    (layout 7): the rows that send a count; the count flag weighs those alone.
    Returns the two per-frame flags, the mean fields to send (None without
    means) and the zigzag of each count's change.
    """
    def per_frame(bits):
        return np.bincount(owner, bits, minlength=nf)

    cz = zigzag(count - count[prev])
    sent = np.ones(count.size, bool) if counts_sent is None else counts_sent
    count_pred = per_frame(np.where(sent, np.where(has_prev, exp_golomb_bits(cz), lb), 0)) < \
        per_frame(sent * lb)
    if mean is None:
        return np.zeros(nf, bool), count_pred, None, cz
    delta = np.where(has_prev, mean - mean[prev], mean)
    mean_pred = per_frame(exp_golomb_bits(zigzag(delta))) < per_frame(
        exp_golomb_bits(zigzag(mean)))
    return mean_pred, count_pred, np.where(mean_pred[owner], delta, mean), cz


def _prediction_slots(batch: FrameBatchV3, val, wid, col, first, owner, per_win, n, channels):
    """Layout 5's lag field (a channel's first subframe) and prediction flags (later ones).

    A frame's ``predict`` flag is set when any of its rows is predicted; then
    each channel's first subframe sends the lag of the channel's predicted
    rows (0: none) in :func:`codec.transform.predict.lag_bits` bits, and each
    later subframe that this lag can predict (``lag <= offset * N``) a flag,
    1 = predicted.  Returns the per-frame flags.
    """
    slot, ch = _slot_channels(batch, first, owner, per_win)
    offset = slot // per_win
    lag = batch.lag.astype(np.int64)
    chlag = np.zeros(first.size * channels, np.int64)
    np.maximum.at(chlag, owner * channels + ch, lag)
    chlag = chlag[owner * channels + ch]
    if ((lag > 0) & ((lag != chlag) | ~predictable(lag, offset, n))).any():
        raise RuntimeError("a predicted row has a lag its frame cannot carry")  # our bug
    predict = np.bincount(owner, lag > 0, minlength=first.size) > 0
    on = predict[owner]
    lead = offset == 0
    val[:, col] = np.where(lead, chlag, lag > 0).astype(np.uint64)
    wid[:, col] = np.where(on & lead, lag_bits(n), np.where(on & predictable(chlag, offset, n),
                                                             1, 0))
    return predict


def _slot_channels(batch: FrameBatchV3, first, owner, per_win):
    """Each subframe's place in its frame (0, 1, ...) and its channel."""
    slot = np.arange(owner.size) - first[owner]
    return slot, np.where(batch.multi[owner].astype(bool), slot % per_win, batch.channel[owner])


def _switch_slots(batch: FrameBatchV3, val, wid, col, first, owner, per_win, channels):
    """Layout 6's basis field: one bit in each channel's first subframe of the frame.

    1: every window of that channel in the frame is on the alternate basis.
    """
    slot, ch = _slot_channels(batch, first, owner, per_win)
    key = owner * channels + ch
    alt = batch.alternate.astype(np.int64)
    on = np.zeros(first.size * channels, np.int64)
    np.maximum.at(on, key, alt)
    if (on[key] != alt).any():
        raise RuntimeError("a channel's windows in one frame are on two bases")  # our bug
    lead = slot < per_win
    val[:, col] = alt.astype(np.uint64)
    wid[:, col] = lead


def _mean_orders(val, wid, col, zz, owner, nf):
    """Layout 5: each frame's exp-Golomb order k of its mean fields, and the fields rewritten.

    k (0 to 15) minimises the frame's mean bits; a field is the order-0 code of
    ``zz >> k`` (its leading zeros in slot ``col``, the codeword in ``col + 1``)
    followed by the ``k`` low bits of ``zz``.
    """
    ks = np.arange(1 << MEAN_ORDER_BITS)
    bits = np.stack([np.bincount(owner, exp_golomb_bits(zz >> k) + k, minlength=nf)
                     for k in ks])
    order = np.argmin(bits, axis=0)  # the smallest order among equals
    k = order[owner].astype(np.uint64)
    hi = (zz.astype(np.uint64) >> k) + np.uint64(1)
    nb = bit_length(hi.astype(np.int64))
    wid[:, col] = nb - 1
    val[:, col + 1] = (hi << k) | (zz.astype(np.uint64) & ((np.uint64(1) << k) - np.uint64(1)))
    wid[:, col + 1] = nb + k.astype(np.int64)
    return order


def _string_slots(batch: FrameBatchV3, val, wid, col, first, owner, per_win, channels,
                  string_len):
    """Layout 7's string lengths: in a multi-channel frame, channel c's first subframe
    (c < channels - 1) ends with the bytes of its range-coded string, 11 bits wide
    (widened to 27 with the frame's long length field by :func:`_widen_strings`).

    The field is the last slot before the padding, ``col = wid.shape[1] - 2``."""
    slot, ch = _slot_channels(batch, first, owner, per_win)
    on = batch.multi[owner].astype(bool) & (slot < per_win) & (ch < channels - 1)
    val[:, col] = np.where(on, string_len[owner * channels + ch], 0).astype(np.uint64)
    wid[:, col] = np.where(on, SHORT_LENGTH_BITS, 0)


def _widen_strings(wid: np.ndarray, on: np.ndarray, long: np.ndarray) -> None:
    """Layout 7's string-length fields (rows ``on``) take the length field's width: 11
    bits, 27 in a frame with the long length field (``long``, per row)."""
    wid[on, -2] = np.where(long[on], LONG_LENGTH_BITS, SHORT_LENGTH_BITS)


def _subframe_slots(batch: FrameBatchV3, n: int, channels: int, quant: np.ndarray | None,
                    count: np.ndarray, all_terms: np.ndarray | None = None,
                    string_len: np.ndarray | None = None):
    """Slots of every subframe header, the frame-header slots left free in each frame's first row.

    ``count``: each row's last non-zero coefficient + 1.  Layout 7: ``all_terms``
    (per row, alike for a channel's rows in a frame) is the flag bit before the
    count of a channel's first subframe, and drops the channel's count fields; and
    ``string_len`` (per frame and channel) gives the string-length fields.
    Returns ``(val, wid, first, lastrow, mean_pred, count_pred, predict,
    one_step, mean_order)`` (layout 5's per-frame fields, None for layouts 3 and 4).
    """
    nf, ns = len(batch), batch.q.shape[0]
    first = np.flatnonzero(np.r_[True, batch.frame[1:] != batch.frame[:-1]])
    lastrow = np.r_[first[1:] - 1, ns - 1]
    nh = len(HEADER_FIELDS_V3 if batch.lag is None else HEADER_FIELDS_V5)
    strings = string_len is not None
    alt_col = nh + 4 + (quant is not None) + (batch.lag is not None)
    nsub = alt_col - nh + (batch.alternate is not None) + strings
    val = np.zeros((ns, nh + nsub + 1), dtype=np.uint64)
    wid = np.zeros((ns, nh + nsub + 1), dtype=np.int64)
    lead = np.zeros(ns, dtype=bool)
    lead[first] = True
    # later windows of a channel in a frame may send mean and count as changes
    # from that channel's previous window in the frame (flags in the frame header)
    owner = np.repeat(np.arange(nf), np.diff(np.r_[first, ns]))
    per_win = np.where(batch.multi.astype(bool), channels, 1)[owner]
    has_prev = np.arange(ns) - first[owner] >= per_win
    prev = np.where(has_prev, np.arange(ns) - per_win, 0)
    mean_pred, count_pred, mean_sent, count_delta = _predictions(
        batch.mean, count, prev, has_prev, owner, nf, count_bits(n),
        None if all_terms is None else ~all_terms)
    write_subheaders(val, wid, nh, lead, batch.step_code, mean_sent, count, count_bits(n),
                     quant)
    cp = count_pred[owner] & has_prev
    val[:, nh + 3] = np.where(cp, count_delta + 1, count).astype(np.uint64)
    wid[:, nh + 3] = np.where(cp, exp_golomb_bits(count_delta), count_bits(n))
    if all_terms is not None:  # layout 7: a channel's first subframe sends the flag, then
        # (flag 0) its count; a flagged channel sends no count in any subframe
        chan_first = ~has_prev
        val[:, nh + 3] = np.where(all_terms, chan_first, val[:, nh + 3])
        wid[:, nh + 3] = np.where(all_terms, chan_first, wid[:, nh + 3] + chan_first)
    predict = one_step = mean_order = None
    if batch.lag is not None:  # layout 5
        predict = _prediction_slots(batch, val, wid, nh + 4, first, owner, per_win, n, channels)
        # frame scope gives a channel one step for all its windows in a frame: sent once
        one_step = np.bincount(owner, has_prev & (batch.step_code != batch.step_code[prev]),
                               minlength=nf) == 0
        wid[has_prev & one_step[owner], nh] = 0
        mean_order = np.zeros(nf, np.int64)
        if mean_sent is not None:
            mean_order = _mean_orders(val, wid, nh + 1, zigzag(mean_sent), owner, nf)
    if batch.alternate is not None:  # layout 6
        _switch_slots(batch, val, wid, alt_col, first, owner, per_win, channels)
    if strings:  # layout 7
        _string_slots(batch, val, wid, nh + nsub - 1, first, owner, per_win, channels,
                      string_len)
    return val, wid, first, lastrow, mean_pred, count_pred, predict, one_step, mean_order


def _join_bodies(heads: np.ndarray, head_bytes: np.ndarray, lanes: np.ndarray,
                 lane_len: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Frame bodies: each frame's header bytes then its lane bytes; returns (body, body_bytes)."""
    body_bytes = head_bytes + lane_len
    bstart = np.cumsum(body_bytes) - body_bytes
    body = np.empty(int(body_bytes.sum()), dtype=np.uint8)
    hstart = np.cumsum(head_bytes) - head_bytes
    body[np.repeat(bstart - hstart, head_bytes) + np.arange(heads.size)] = heads
    lstart = np.cumsum(lane_len) - lane_len
    body[np.repeat(bstart + head_bytes - lstart, lane_len) + np.arange(lanes.size)] = lanes
    return body, body_bytes


def _lane_base(multi: np.ndarray, channels: int, strings: bool) -> np.ndarray:
    """Each frame's first range-coder lane (:func:`_lanes_of_rows`)."""
    per = np.where(multi.astype(bool) & strings, channels, 1)
    return np.cumsum(per) - per


def _lanes_of_rows(multi: np.ndarray, owner: np.ndarray, channel: np.ndarray, channels: int,
                   strings: bool) -> tuple[np.ndarray, np.ndarray]:
    """Each row's range-coder lane and each frame's first lane.

    One lane per frame, or with ``strings`` (layout 7) one per channel of a
    multi-channel frame, in channel order.
    """
    base = _lane_base(multi, channels, strings)
    on = (multi.astype(bool) & strings)[owner]
    return base[owner] + np.where(on, channel, 0), base


def _all_terms(batch: FrameBatchV3, count: np.ndarray, first: np.ndarray, owner: np.ndarray,
               per_win: np.ndarray, n: int, lane: np.ndarray, nlanes: int) -> np.ndarray:
    """Layout 7: per lane (a channel in a frame), whether its count fields cost more than
    coding every coefficient.

    A channel's count fields are priced as sent (whole, or as changes where
    that is cheaper for the channel); the zeros after each count at the range
    coder's ideal code lengths (:func:`codec.entropy.rangecoder.zero_tail_bits`).
    """
    has_prev = np.arange(owner.size) - first[owner] >= per_win
    prev = np.where(has_prev, np.arange(owner.size) - per_win, 0)
    change = np.where(has_prev, exp_golomb_bits(zigzag(count - count[prev])), count_bits(n))
    fields = np.minimum(np.bincount(lane, change, minlength=nlanes),
                        np.bincount(lane, minlength=nlanes) * count_bits(n))
    tails = np.bincount(lane, zero_tail_bits(batch.q, count, batch.mean is not None),
                        minlength=nlanes)
    return tails < fields


def _code_strings(batch: FrameBatchV3, quant, n: int, channels: int, strings: bool):
    """Range-code the coefficients: one string per frame, or with ``strings`` (layout 7)
    one per channel of a multi-channel frame and the all-terms choice.

    Returns the bytes of every string, each frame's coefficient bytes, layout 7's
    all-terms flag of each row (alike for a channel's rows in a frame) and its
    string lengths by (frame, channel) (None before), and each row's count
    (last non-zero coefficient + 1).  In layout 7 a lane is one channel in one frame.
    """
    nf = len(batch)
    count = _counts(batch.q)
    first = np.flatnonzero(np.r_[True, batch.frame[1:] != batch.frame[:-1]])
    owner = batch.frame
    per_win = np.where(batch.multi.astype(bool), channels, 1)[owner]
    _slot, ch = _slot_channels(batch, first, owner, per_win)
    lane, lane_base = _lanes_of_rows(batch.multi, owner, ch, channels, strings)
    nlanes = max(int(lane.max(initial=-1)), int(lane_base[-1]) if nf else -1) + 1
    # rows of a lane in row order, lanes in order (a multi-channel frame's rows are
    # window-major, its strings channel by channel)
    order = np.argsort(lane, kind="stable") if (np.diff(lane) < 0).any() else None
    lane_sorted = lane if order is None else lane[order]
    all_terms = (_all_terms(batch, count, first, owner, per_win, n, lane, nlanes) if strings
                 else None)
    while True:
        coded = count if all_terms is None else np.where(all_terms[lane], n, count)
        cum, freq, shift, row = coefficient_ops(batch.q, coded, trellis=quant,
                                                mean=batch.mean is not None, order=order)
        lanes, string_len = encode_lanes(cum, freq, shift, lane_sorted[row], nlanes)
        lane_len = np.add.reduceat(string_len, lane_base) if nf else string_len[:0]
        if all_terms is None:
            return lanes, lane_len, None, None, count
        # an all-terms channel carries at least one coefficient byte per subframe, so the
        # rows a receiver decodes stay bounded by the frame's bytes (subframes_fit); one
        # that would not keeps its counts (its string changes, no other)
        thin = all_terms & (string_len < np.bincount(lane, minlength=nlanes))
        if not thin.any():
            break
        all_terms = all_terms & ~thin
    str_len = np.zeros(nf * channels, np.int64)  # by (frame, channel) of multi frames
    multi_f = np.flatnonzero(batch.multi.astype(bool) & (channels > 1))
    idx = (multi_f[:, None] * channels + np.arange(channels)).ravel()
    str_len[idx] = string_len[(lane_base[multi_f][:, None] + np.arange(channels)).ravel()]
    return lanes, lane_len, all_terms[lane], str_len, count


def pack_frames_v3(batch: FrameBatchV3, profile_id: int, n: int, channels: int,
                   version: int = LAYOUT_VERSION_3, *, key: FrameKey
                   ) -> tuple[bytes, np.ndarray, np.ndarray, np.ndarray]:
    """Pack every frame of ``batch`` in layout 3, or in layout 4 (``version`` 4: a quantizer
    bit per subframe, 1 where the rows of ``batch.q`` are levels of dependent quantization),
    or in layout 5 (``version`` 5: ``batch.lag`` says which rows are predicted), 6 (and
    ``batch.alternate`` the rows on the alternate basis) or 7 (and, where it saves bits, no
    count fields; a range-coded string per channel of a multi-channel frame).

    Returns the bytes, each frame's byte length, each subframe's header bits
    (step, mean, count and the fields after them) and each frame's range-coded bytes.
    """
    nf, ns = len(batch), batch.q.shape[0]
    quant = None
    if version >= PREDICTION_VERSION and batch.lag is None:
        batch = dataclasses.replace(batch, lag=np.zeros(ns, np.int64))
    if version == QUANTIZER_BIT_VERSION:  # layout 4 (codec.layouts.v4)
        quant = (np.zeros(ns, dtype=bool) if batch.quantizer is None
                 else batch.quantizer.astype(bool))
    strings = version >= STRINGS_VERSION
    lanes, lane_len, all_terms, str_len, count = _code_strings(batch, quant, n, channels,
                                                               strings)
    owner = batch.frame
    val, wid, first, lastrow, mean_pred, count_pred, predict, one_step, mean_order = \
        _subframe_slots(batch, n, channels, quant, count, all_terms, str_len)
    ctx = ParseContext(n, channels, batch.mean is not None)
    table = HEADER_FIELDS_V3 if predict is None else HEADER_FIELDS_V5
    fields = {"version": version, "profile": profile_id & 0xFF,
              "sequence": batch.sequence % 256, "windows_minus_1": batch.windows - 1,
              "multi": batch.multi.astype(bool), "channel": batch.channel,
              "short": batch.valid < n, "valid_minus_1": batch.valid - 1,
              "mean_change": mean_pred, "count_change": count_pred, "predict": predict,
              "one_step": one_step, "mean_order": mean_order}
    head_bits = header_bits(table, fields, ctx, nf, skip=("length",))
    nh = len(table)
    string_col = wid[:, -2] > 0 if strings else np.zeros(owner.size, bool)
    payload = np.add.reduceat(wid[:, nh:].sum(axis=1), first)
    long, bits, head_bytes, length = size_length_fields(
        head_bits + payload, lane_len, widen=1 + np.bincount(owner[string_col], minlength=nf))
    _widen_strings(wid, string_col, long[owner])
    sub_bits = wid[:, nh:].sum(axis=1)
    head = header_slots(table, {**fields, "long": long, "length": length}, ctx, nf)
    write_frame_heads(val, wid, first, lastrow, head, head_bytes * 8 - bits)
    heads = pack_fields(val.ravel(), wid.ravel())
    # frame = sync | header bytes | lane bytes | crc
    out = wrap_frames(*_join_bodies(heads, head_bytes, lanes, lane_len), key)
    if out.size != int(length.sum()):
        raise RuntimeError("v3 frames differ from their length fields")  # our bug
    return out.tobytes(), length, sub_bits, lane_len


def _read_subheaders_all(r, p, cnt, per_win, h, has_mean, quantizer_bit, n, predict=False,
                         switch=False, strings=False):
    """Every subframe header of every frame.

    Returns (step, mean, count, quant, lag, alternate, string_len, terms, end pos, bad);
    ``lag`` (layouts 5 to 7, else None) is each row's prediction lag, 0 where it
    is not predicted; ``alternate`` (layouts 6 and 7 with ``switch``, else None)
    whether each row is on the alternate basis; ``string_len`` (layout 7, else
    None) per frame and subframe slot, the string length a channel's first
    subframe of a multi-channel frame sends (-1 where none is sent); ``terms``
    (layout 7, else None) each row's all-terms flag.
    """
    ns = int(cnt.sum())
    sstart = np.cumsum(cnt) - cnt
    step = np.zeros(ns, np.int64)
    mean = np.zeros(ns, np.int64) if has_mean else None
    count = np.zeros(ns, np.int64)
    quant = np.zeros(ns, np.int64) if quantizer_bit else None
    lag = chlag = None
    if predict:
        lag, chlag = np.zeros(ns, np.int64), np.zeros(ns, np.int64)
    alternate = np.zeros(ns, bool) if switch else None
    mean_pred, count_pred = h["mean_change"] > 0, h["count_change"] > 0
    terms = np.zeros(ns, bool) if strings else None
    width = np.where(h["long"] > 0, LONG_LENGTH_BITS, SHORT_LENGTH_BITS)
    nmax = int(per_win.max(initial=1))
    string_len = np.full((cnt.size, nmax), -1, np.int64) if strings else None
    bad_any = np.zeros(cnt.size, dtype=bool)
    for s in range(int(cnt.max(initial=0))):
        fr = np.flatnonzero(cnt > s)
        rows = sstart[fr] + s
        pw = per_win[fr]
        later = s >= pw
        p[fr], bad = read_subheaders(r, p[fr], rows, s, step, mean, count, count_bits(n), n,
                                      quant, later & mean_pred[fr], later & count_pred[fr],
                                      np.where(later, rows - pw, rows),
                                      later & (h["one_step"][fr] > 0) if predict else None,
                                      h["mean_order"][fr] if predict and has_mean else None,
                                      ~later if strings else None, terms)
        bad_any[fr] |= bad
        if predict:
            p[fr] = _read_prediction(r, p[fr], rows, s, pw, h["predict"][fr] > 0, lag, chlag, n)
        if switch:  # a channel's first subframe sends the bit, its later ones repeat it
            lead = np.flatnonzero(~later)
            alternate[rows[lead]] = r.read(p[fr][lead], 1) > 0
            p[fr[lead]] += 1
            back = np.flatnonzero(later)
            alternate[rows[back]] = alternate[rows[back] - pw[back]]
        if strings:  # channels 0 .. C - 2 of a multi-channel frame: their string's bytes
            on = np.flatnonzero((pw > 1) & (s < pw - 1))
            if on.size:
                f = fr[on]
                string_len[f, s] = r.read(p[f], width[f])
                p[f] += width[f]
    return step, mean, count, quant, lag, alternate, string_len, terms, p, bad_any


def _read_prediction(r, pp, rows, s, pw, on, lag, chlag, n):
    """Layout 5: subframe ``s``'s lag field (a channel's first) or prediction flag (later ones).

    Fills ``chlag`` (the lag of the row's channel in its frame) and ``lag``
    (the row's lag when its flag says predicted) at ``rows``; returns the bit
    positions after the fields.
    """
    later = s >= pw
    lead = np.flatnonzero(on & ~later)
    if lead.size:
        chlag[rows[lead]] = r.read(pp[lead], lag_bits(n))
        pp[lead] += lag_bits(n)
    back = np.flatnonzero(later)
    chlag[rows[back]] = chlag[rows[back] - pw[back]]
    flag = np.flatnonzero(on & later & predictable(chlag[rows], s // pw, n))
    if flag.size:
        lag[rows[flag]] = np.where(r.read(pp[flag], 1) > 0, chlag[rows[flag]], 0)
        pp[flag] += 1
    return pp


def parse_frames_v3(data: bytes, offsets: np.ndarray, lengths: np.ndarray, n: int,
                    channels: int, has_mean: bool, version: int = LAYOUT_VERSION_3,
                    switch: bool = False) -> ParsedFrames:
    """Parse CRC-checked v3 (or, with ``version`` 4 to 7, v4 to v7) frames at ``offsets``.

    ``switch``: version 6 and 7 frames carry the basis field (the profile's
    basis has an alternate, :func:`codec.transform.bases.alternate_basis`).

    Rows are subframes, window by window (``row_offset``: window number
    relative to the frame's ``sequence``); ``header`` holds the frame-header
    fields of :data:`HEADER_FIELDS_V3` (``mean_change`` / ``count_change``:
    whether later windows send their mean / count as a change).  A frame whose
    contents do not match its length, or whose fields are impossible under
    the profile, is refused in the verdicts; the profile byte is not checked
    here (:meth:`Layout3.parse` does it first).
    """
    ctx = ParseContext(n, channels, has_mean)
    r = BitReader(data)
    offsets = offsets.astype(np.int64)
    predict = version >= PREDICTION_VERSION
    switch = switch and version >= SWITCH_VERSION
    strings = version >= STRINGS_VERSION
    h, p = read_header(r, offsets * 8 + 8 * len(SYNC),
                       HEADER_FIELDS_V5 if predict else HEADER_FIELDS_V3, ctx)
    windows, multi = h["windows_minus_1"] + 1, h["multi"] > 0
    valid = np.where(h["short"] > 0, h["valid_minus_1"] + 1, n)
    per_win = np.where(multi, channels, 1)
    cnt = windows * per_win
    # Before anything is allocated: a frame whose header claims more subframes than its
    # own bytes can hold (each subframe header takes at least min_subframe_bits) is
    # refused and gets no rows, so the work and memory per frame follow its length.
    fits = subframes_fit(cnt, p - offsets * 8, lengths, n, has_mean,
                         version == QUANTIZER_BIT_VERSION, h["count_change"] > 0,
                         h["one_step"] > 0 if predict else None, strings)
    cnt = np.where(fits, cnt, 0)
    owner = np.repeat(np.arange(offsets.size), cnt)
    slot = np.arange(owner.size) - (np.cumsum(cnt) - cnt)[owner]
    woff = slot // per_win[owner]
    sub_channel = np.where(multi[owner], slot % per_win[owner], h["channel"][owner])
    step, mean, count, quant, lag, alternate, string_len, terms, p, bad = _read_subheaders_all(
        r, p, cnt, per_win, h, has_mean, version == QUANTIZER_BIT_VERSION, n, predict, switch,
        strings)
    start = offsets + (p - offsets * 8 + 7) // 8
    end = offsets + lengths - CRC_BYTES
    ok = fits & ~bad & (start <= end) & (h["length"] == lengths)
    start = np.minimum(start, end)
    lane, lstart, lend, lok, lane_frame = _string_bounds(
        multi, owner, sub_channel, channels, strings, string_len, start, end)
    ok &= lok
    if strings:  # an all-terms channel carries at least a coefficient byte per subframe:
        # a frame that breaks it is refused and decodes nothing (work follows its bytes)
        thin = np.bincount(lane, terms, minlength=lstart.size) > lend - lstart
        ok &= np.bincount(lane_frame, thin, minlength=offsets.size) == 0
        count = np.where(ok[owner], count, 0)
    buf = np.frombuffer(data, dtype=np.uint8)
    trellis = np.zeros(owner.size, bool) if quant is None else quant.astype(bool)
    q, bad, reads = decode_coefficients(buf, lstart, lend, lane, count, n,
                                        trellis=None if quant is None else trellis,
                                        mean=has_mean)
    # every lane must be used: no byte past what the decoder read, no trailing zero byte,
    # and no byte at all in a lane with nothing to decode
    lane_len = lend - lstart
    last = buf[np.maximum(lend - 1, 0)]
    coded = np.bincount(lane, count, minlength=lane_len.size) > 0
    used = ~bad & (lane_len <= reads + 1) & ((lane_len == 0) | ((last != 0) & coded))
    ok &= np.bincount(lane_frame, ~used, minlength=offsets.size) == 0
    v = Verdicts(offsets.size)
    refuse_contents(v, valid, owner, sub_channel, ok, ctx)
    sub_valid = np.where(woff == windows[owner] - 1, valid[owner], n)
    return parsed_frames(v, h, valid, owner, sub_channel, woff, sub_valid, step, mean, count,
                         trellis, q, lag, alternate, terms)


def _string_bounds(multi, owner, channel, channels, strings, string_len, start, end):
    """Each row's lane, each lane's bytes ``[lstart, lend)``, per frame whether the string
    lengths fit its coefficient bytes, and each lane's frame.

    One lane per frame from ``start`` to ``end``; in a layout-7 multi-channel
    frame one per channel, the first C - 1 as long as their length fields
    say, the last running to ``end``.
    """
    lane, base = _lanes_of_rows(multi, owner, channel, channels, strings)
    if not strings or not multi.any():
        return lane, start, end, np.ones(start.size, bool), np.arange(start.size)
    per = np.where(multi, channels, 1)
    lane_frame = np.repeat(np.arange(start.size), per)
    sizes = np.zeros(lane_frame.size, np.int64)  # the last lane of a frame: to its end
    mf = np.flatnonzero(multi)
    lens = np.maximum(string_len[mf, :channels - 1], 0)
    sizes[(base[mf][:, None] + np.arange(channels - 1)).ravel()] = lens.ravel()
    fits = np.ones(start.size, bool)
    fits[mf] = lens.sum(axis=1) <= end[mf] - start[mf]
    before = np.cumsum(sizes) - sizes  # bytes of the lanes before, from the first frame's
    lstart = start[lane_frame] + before - before[base][lane_frame]
    lend = lstart + sizes
    lend[base + per - 1] = end
    over = ~fits[lane_frame]  # lengths past the bytes: the frame is refused, its lanes empty
    lstart[over] = lend[over] = end[lane_frame][over]
    return lane, lstart, lend, fits, lane_frame


def _pack_v3(c: CodedFrames, key: FrameKey, version: int) -> PackedFrames:
    """Frames of layout ``version`` (3, 4 or 5): windows go ``windows_per_frame`` at a time.

    Header bits are everything but the range-coded bytes."""
    w = c.windows_per_frame
    group = c.sequence // w
    alternate = None  # layout 6 sends the basis field where the profile's basis has one
    if version >= SWITCH_VERSION and has_alternate_basis(c.basis_code, c.n):
        alternate = np.zeros(c.q.shape[0], bool) if c.alternate is None else c.alternate
    if c.multi:
        order = np.arange(c.channel.size)  # rows are window-major, channel-minor already
        frame = group
    else:
        order = np.lexsort((c.sequence, c.channel, group))
        frame = group[order] * c.channels + c.channel[order]
    frame = np.unique(frame, return_inverse=True)[1]
    first = np.flatnonzero(np.r_[True, frame[1:] != frame[:-1]])
    lastrow = np.r_[first[1:] - 1, frame.size - 1]
    fo = order[first]
    nwin = c.sequence[order[lastrow]] - c.sequence[fo] + 1
    parts = []
    bounds = np.r_[first, frame.size]
    for a in range(0, first.size, PACK_BLOCK):  # blocks of frames: temporaries stay cached
        b = min(a + PACK_BLOCK, first.size)
        r0, r1 = bounds[a], bounds[b]
        rows = order[r0:r1]
        batch = FrameBatchV3(
            multi=np.full(b - a, c.multi), channel=c.channel[fo[a:b]],
            sequence=c.sequence[fo[a:b]], windows=nwin[a:b], valid=c.valid[order[lastrow[a:b]]],
            frame=frame[r0:r1] - frame[r0], step_code=c.step_code[rows],
            mean=None if c.mean is None else c.mean[rows], q=c.q[rows],
            quantizer=None if c.trellis is None else c.trellis[rows],
            lag=None if c.lag is None else c.lag[rows],
            alternate=None if alternate is None else alternate[rows])
        parts.append(pack_frames_v3(batch, c.profile_id, c.n, c.channels, version, key=key))
    data = b"".join(p[0] for p in parts)
    lengths, lane_len = (np.concatenate([p[i] for p in parts]) for i in (1, 3))
    cnt = np.bincount(frame, minlength=first.size)
    bits_sorted = np.repeat(lengths * 8 // cnt, cnt)
    bits_sorted[first] += lengths * 8 - (lengths * 8 // cnt) * cnt
    bits = np.empty_like(bits_sorted)
    bits[order] = bits_sorted
    row_frame = np.empty_like(frame)
    row_frame[order] = frame
    return PackedFrames(data, bits, int(lengths.sum() * 8 - lane_len.sum() * 8), row_frame,
                        (lengths - lane_len) * 8)


class Layout3:
    """Layout 3 (the default): up to 16 windows per frame under one header, range-coded.

    One budget may cover every window of a channel in a frame (frame scope).
    ``version`` and ``trellis`` make the same routines serve layout 4
    (:mod:`codec.layouts.v4`), which composes one of these.
    """

    sequence_bits = 8
    length_field = LengthField("flagged", MIN_V3_BYTES)
    supports_frame_scope = True
    spends_slack = True

    def __init__(self, version: int = LAYOUT_VERSION_3, trellis: bool = False,
                 predicts: bool = False, switches_basis: bool = False):
        self.version = version
        self.has_trellis = trellis
        self.predicts = predicts
        self.switches_basis = switches_basis

    def windows_per_frame(self, profile) -> int:
        return profile.windows_per_frame

    def max_frame_bytes(self, profile) -> int:
        return max_frame_bytes_for(profile, profile.windows_per_frame)

    def choose_codes(self, cx, mean, dc, budget, n):
        code = choose_steps(cx, mean, dc, budget, RD_OFFSET_V3)
        return code, np.full(code.size, RD_OFFSET_V3)

    def block_offset(self) -> float:
        return RD_OFFSET_V3

    def pack(self, coded: CodedFrames, key: FrameKey) -> PackedFrames:
        return _pack_v3(coded, key, self.version)

    def parse(self, data: bytes, offsets: np.ndarray, lengths: np.ndarray,
              ctx: ParseContext) -> ParsedFrames:
        return parse_checked(
            lambda d, o, ln, c: parse_frames_v3(
                d, o, ln, c.n, c.channels, c.has_mean, self.version,
                self.switches_basis and has_alternate_basis(c.basis_code, c.n)),
            data, offsets, lengths, ctx)


LAYOUT_3 = register_layout(Layout3())
