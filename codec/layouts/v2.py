"""Frame layout version 2: compact header, multi-channel frames, adaptive Rice-coded payload.

Written down bit by bit in ``FRAME_LAYOUT.md`` ("Version 2").  Every field is
a fixed-width integer or a Rice / exp-Golomb codeword with a parameter from a
4-coefficient context, so a small microcontroller produces it with shifts and
adds, no multiplications or tables.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..entropy.bits import BitReader, pack_fields
from ..entropy.rice import CONTEXT_WINDOW, exp_golomb_bits, read_exp_golomb, read_rice_escape
from ..quantize.select import choose_steps, code_frame
from .envelope import CRC_BYTES, SYNC, FrameKey, wrap_frames
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
    STEP_BITS,
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

__all__ = [
    "LAYOUT_VERSION_2",
    "CONTEXT_WINDOW",
    "HEADER_FIELDS_V2",
    "FrameBatchV2",
    "Layout2",
    "LAYOUT_2",
    "pack_frames_v2",
    "parse_frames_v2",
    "payload_bits_v2",
    "rice_parameters",
    "rate_fidelity_choice",
]

LAYOUT_VERSION_2 = 2
K_INIT_BITS = 5
#: Smallest possible v2 frame: sync, 2 length bytes, 3 header bytes, CRC.
MIN_V2_BYTES = len(SYNC) + 2 + 3 + CRC_BYTES


def _valid_width(h, ctx) -> np.ndarray:
    return np.where(h["short"], index_bits(ctx.n), 0)


#: (field, bits, meaning) of the frame header after the sync marker; ``bits`` may be a
#: function of the fields before it (:mod:`codec.layouts.fields`).
HEADER_FIELDS_V2 = (
    ("version", 4, "frame layout version (2)"),
    ("long", 1, "0: the length field has 11 bits; 1: 27 bits"),
    ("length", length_width, "bytes in the whole frame, sync marker to CRC"),
    ("profile", 8, "low byte of the 16-bit profile identifier"),
    ("sequence", 8, "time-window index modulo 256"),
    ("multi", 1, "1: every channel of the profile, in profile order; 0: one channel"),
    ("channel", lambda h, c: np.where(h["multi"], 0, 8), "channel index (when multi = 0)"),
    ("short", 1, "1: a short last window"),
    ("valid_minus_1", _valid_width, "real samples in the window minus one (when short = 1)"),
)


def rice_parameters(mag: np.ndarray, k_init: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rice parameter and context of every coefficient of every frame (rows).

    Coefficient 0 uses the frame's ``k_init``; coefficient j >= 1 uses the
    LOCO-I rule on ``total``, the sum of the previous ``min(j, CONTEXT_WINDOW)``
    magnitudes.  Returns ``(k, total)`` (``total[:, 0]`` is -1: no context).
    """
    from ..entropy.rice import preceding_sums, rice_k_from_context

    nf, n = mag.shape
    total = preceding_sums(mag, CONTEXT_WINDOW)
    k = np.empty((nf, n), dtype=np.int64)
    k[:, 0] = k_init
    w = min(CONTEXT_WINDOW, n)
    for jj in range(1, w):  # the first few coefficients see a shorter context
        k[:, jj] = rice_k_from_context(total[:, jj - 1], jj)
    k[:, w:] = rice_k_from_context(total[:, w - 1 :], CONTEXT_WINDOW)
    ctx = np.empty((nf, n), dtype=np.int64)
    ctx[:, 0] = -1
    ctx[:, 1:] = total
    return k, ctx


def _runs(run: np.ndarray, nz: np.ndarray):
    """Run-mode runs: (row, first index, exp-Golomb width, r + 1) of each, in stream order.

    A run is a maximal block of run-mode indices; it always ends on a non-zero
    coefficient, so starts and ends pair up in row-major order.
    """
    prev = np.zeros_like(run)
    prev[:, 1:] = run[:, :-1]
    srow, scol = np.nonzero(run & ~prev)
    _, ecol = np.nonzero(run & nz)
    eg = (ecol - scol + 1).astype(np.int64)
    return srow, scol, exp_golomb_bits(eg - 1), eg


def _coding_state(q: np.ndarray, k_init: np.ndarray, last: np.ndarray):
    """Magnitudes, non-zero mask, Rice parameters, in-range mask and run-mode mask."""
    mag = np.abs(q)
    k, ctx = rice_parameters(mag, k_init)
    inside = np.arange(q.shape[1]) < last[:, None]
    return mag, mag > 0, k, inside, (ctx == 0) & inside


def coefficient_bits(q: np.ndarray, k_init: np.ndarray, last: np.ndarray) -> np.ndarray:
    """Bits of the coded coefficients of each subframe (what :func:`coefficient_items` packs)."""
    from ..entropy.rice import rice_escape_bits

    ns = q.shape[0]
    mag, nz, k, inside, run = _coding_state(q, k_init, last)
    srow, _, eg_w, _ = _runs(run, nz)
    m = np.where(run, mag - 1, mag)
    w = rice_escape_bits(np.maximum(m, 0), np.where(run, 0, k)) + nz
    coded = inside & (~run | nz)
    return np.where(coded, w, 0).sum(axis=1) + np.bincount(srow, eg_w, minlength=ns).astype(
        np.int64)


def coefficient_items(q: np.ndarray, k_init: np.ndarray, last: np.ndarray) -> list:
    """The coded coefficients of each subframe as three (value, width) slot pairs per index.

    Regular mode (coefficient 0, or a non-zero context): the magnitude in the
    layout's Rice code with the context's parameter, then a sign bit if it is
    not zero.  Run mode (context sum 0, i.e. the previous CONTEXT_WINDOW
    magnitudes were all zero): at the first such index one exp-Golomb (order 0)
    codeword gives the number r of zeros that follow, and the coefficient r
    places further on, which is not zero, is sent as ``magnitude - 1`` in the
    Rice code with k = 0 and a sign bit.  Run mode follows the run-length
    method of Golomb (1966) and the run mode of LOCO-I / JPEG-LS.

    Returns ``[(run_v, run_w), (main_v, main_w), (extra_v, extra_w)]``, each (rows, n):
    the run codeword at a run's first index; the codeword (whole when it fits
    64 bits, else its unary part) and its remainder, at the index it codes.
    """
    from ..entropy.rice import rice_escape_fields

    ns, n = q.shape
    mag, nz, k, inside, run = _coding_state(q, k_init, last)
    srow, scol, eg_w, eg = _runs(run, nz)
    run_w = np.zeros((ns, n), dtype=np.int64)
    run_v = np.zeros((ns, n), dtype=np.uint64)
    run_w[srow, scol] = eg_w
    run_v[srow, scol] = eg
    coded = inside & (~run | nz)  # regular indices, and the non-zero ending each run
    m = np.where(run, mag - 1, mag)
    kk = np.where(run, 0, k)
    _, uw, lv, lw = rice_escape_fields(np.maximum(m, 0), kk)
    sw = nz.astype(np.int64)
    tail = (lv << sw.astype(np.uint64)) | (q < 0).astype(np.uint64)
    tw = lw + sw
    whole = uw + tw <= 64
    main_v = np.where(whole, (np.uint64(1) << tw.astype(np.uint64)) | tail, np.uint64(1))
    main_w = np.where(coded, np.where(whole, uw + tw, uw), 0)
    extra_v = np.where(whole, np.uint64(0), tail)
    extra_w = np.where(coded & ~whole, tw, 0)
    return [(run_v, run_w), (main_v, main_w), (extra_v, extra_w)]


def initial_parameter(mag0: np.ndarray) -> np.ndarray:
    """``k_init`` the encoder sends: the Rice parameter that codes coefficient 0 shortest."""
    from ..entropy.bits import bit_length as _bit_length

    return np.clip(_bit_length(mag0) - 1, 0, (1 << K_INIT_BITS) - 1)


def payload_bits_v2(q: np.ndarray, mean_int: np.ndarray | None, n: int) -> np.ndarray:
    """Bits of each subframe (rows of ``q``) in layout v2, frame header excluded.

    Exact for a subframe that leads its frame; a later subframe of a
    multi-channel frame sends its step as a difference, usually in fewer bits.
    """
    from ..entropy.rice import zigzag

    nz = q != 0
    last = np.where(nz.any(axis=1), n - np.argmax(nz[:, ::-1], axis=1), 0)
    coef = coefficient_bits(q, initial_parameter(np.abs(q[:, 0])), last)
    bits = STEP_BITS + count_bits(n) + np.where(last > 0, K_INIT_BITS, 0) + coef
    if mean_int is not None:
        bits += exp_golomb_bits(zigzag(mean_int))
    return bits


@dataclass

@dataclass(frozen=True)
class FrameBatchV2:
    """Frames of layout v2 as parallel arrays.

    Subframes (one per channel carried) are the rows of ``q``; ``frame`` gives
    each subframe's frame, non-decreasing, so a frame's subframes are
    consecutive rows.  Per frame: ``multi`` (all channels, in profile order),
    ``channel`` (when not multi), ``sequence`` and ``valid``.
    """

    multi: np.ndarray
    channel: np.ndarray
    sequence: np.ndarray
    valid: np.ndarray
    frame: np.ndarray
    step_code: np.ndarray
    mean: np.ndarray | None
    q: np.ndarray

    def __len__(self) -> int:
        return int(self.multi.size)


def pack_frames_v2(batch: FrameBatchV2, profile_id: int, n: int, *, key: FrameKey
                   ) -> tuple[bytes, np.ndarray, np.ndarray]:
    """Pack every frame of ``batch`` in layout v2.

    Returns the bytes, each frame's byte length, each subframe's payload bits
    and, of those, its side-information bits (step, count, k_init).
    """

    q = batch.q
    ns = q.shape[0]
    lb = count_bits(n)
    mag = np.abs(q)
    nz = mag > 0
    last = np.where(nz.any(axis=1), n - np.argmax(nz[:, ::-1], axis=1), 0)
    k_init = initial_parameter(mag[:, 0])

    nh, nsub = 9, 5
    items = coefficient_items(q, k_init, last)
    (rv, rw), (mv, mw), (ev, ew) = items
    total_w = rw + mw + ew
    merged = bool((total_w <= 64).all())
    # Usually a coefficient's run codeword, codeword and remainder fit one 64-bit
    # field together: one slot per coefficient instead of three (less to pack).
    per = 1 if merged else 3
    slots = nh + nsub + per * n + 1
    val = np.zeros((ns, slots), dtype=np.uint64)
    wid = np.zeros((ns, slots), dtype=np.int64)
    # subframe header
    s0 = nh
    # The first subframe of a frame sends its step code in 10 bits; the others
    # send the change from the previous subframe's code, exp-Golomb order 0 of
    # its zigzag (channels of one window usually have similar steps).
    lead = np.r_[True, batch.frame[1:] != batch.frame[:-1]]
    write_subheaders(val, wid, s0, lead, batch.step_code, batch.mean, last, lb)
    val[:, s0 + 4] = k_init
    wid[:, s0 + 4] = np.where(last > 0, K_INIT_BITS, 0)
    c0 = nh + nsub
    if merged:
        zero = np.uint64(0)
        comb = np.where(ew > 0, ev, zero)
        comb |= np.where(mw > 0, mv << np.where(mw > 0, ew, 0).astype(np.uint64), zero)
        comb |= np.where(rw > 0, rv << np.where(rw > 0, mw + ew, 0).astype(np.uint64), zero)
        val[:, c0 : c0 + n] = comb
        wid[:, c0 : c0 + n] = total_w
    else:
        for i, (v, w) in enumerate(items):
            val[:, c0 + i : c0 + 3 * n : 3] = np.where(w > 0, v, np.uint64(0))
            wid[:, c0 + i : c0 + 3 * n : 3] = w
    sub_bits = wid.sum(axis=1)
    side_bits = wid[:, s0] + wid[:, s0 + 3] + wid[:, s0 + 4]  # step, count, k_init

    # frame header (in the first subframe row of each frame)
    first = np.flatnonzero(np.r_[True, batch.frame[1:] != batch.frame[:-1]])
    lastrow = np.r_[first[1:] - 1, ns - 1]
    short = batch.valid < n
    multi = batch.multi.astype(bool)
    nf = first.size
    ctx = ParseContext(n, 0, batch.mean is not None)
    fields = {"version": LAYOUT_VERSION_2, "profile": profile_id & 0xFF,
              "sequence": batch.sequence % 256, "multi": multi, "channel": batch.channel,
              "short": short, "valid_minus_1": batch.valid - 1}
    head_bits = header_bits(HEADER_FIELDS_V2, fields, ctx, nf, skip=("length",))
    payload = np.add.reduceat(sub_bits, first)
    long, bits, body_bytes, length = size_length_fields(head_bits + payload, 0)
    head = header_slots(HEADER_FIELDS_V2, {**fields, "long": long, "length": length}, ctx, nf)
    write_frame_heads(val, wid, first, lastrow, head, body_bytes * 8 - bits)
    body = pack_fields(val.ravel(), wid.ravel())

    out = wrap_frames(body, body_bytes, key)
    return out.tobytes(), length, sub_bits, side_bits



def parse_frames_v2(data: bytes, offsets: np.ndarray, lengths: np.ndarray, n: int,
                    channels: int, has_mean: bool) -> ParsedFrames:
    """Parse CRC-checked v2 frames at ``offsets`` into per-subframe rows.

    Every count read from the wire is checked before use; a frame whose
    contents do not fill its length exactly (to the byte), whose subframe
    headers hold impossible values, or whose valid samples or channel fall
    outside the profile is refused in the verdicts.  The profile byte is not
    checked here (:meth:`Layout2.parse` does it first).
    """
    ctx = ParseContext(n, channels, has_mean)
    r = BitReader(data)
    offsets = offsets.astype(np.int64)
    h, p = read_header(r, offsets * 8 + 8 * len(SYNC), HEADER_FIELDS_V2, ctx)
    multi = h["multi"].astype(bool)
    valid = np.where(h["short"] > 0, h["valid_minus_1"] + 1, n)
    cnt = np.where(multi, channels, 1)
    fits = subframes_fit(cnt, p - offsets * 8, lengths, n, has_mean)
    cnt = np.where(fits, cnt, 0)  # refused before any row is allocated
    ns = int(cnt.sum())
    sstart = np.cumsum(cnt) - cnt
    owner = np.repeat(np.arange(offsets.size), cnt)
    slot = np.arange(ns) - sstart[owner]
    sub_channel = np.where(multi[owner], slot, h["channel"][owner])
    step = np.zeros(ns, np.int64)
    mean = np.zeros(ns, np.int64) if has_mean else None
    count = np.zeros(ns, np.int64)
    q = np.zeros((ns, n), dtype=np.int64)
    ok = fits.copy()
    lb = count_bits(n)
    for s in range(int(cnt.max(initial=0))):
        fr = np.flatnonzero(cnt > s)
        rows = sstart[fr] + s
        pp, bad = read_subheaders(r, p[fr], rows, s, step, mean, count, lb, n)
        c = count[rows]
        kk = r.read(pp, np.where(c > 0, K_INIT_BITS, 0))
        pp = pp + np.where(c > 0, K_INIT_BITS, 0)
        # Coefficients: one vectorized step per coefficient index over all frames.
        q[rows], pp, bad_c = _read_coefficients(r, pp, c, kk, n)
        ok[fr] &= ~(bad | bad_c)
        p[fr] = pp
    end_bytes = (p - offsets * 8 + 7) // 8 + CRC_BYTES
    ok &= (end_bytes == lengths) & (h["length"] == lengths)
    v = Verdicts(offsets.size)
    refuse_contents(v, valid, owner, sub_channel, ok, ctx)
    return parsed_frames(v, h, valid, owner, sub_channel, np.zeros(ns, np.int64), valid[owner],
                         step, mean, count, np.zeros(ns, dtype=bool), q)


def _read_coefficients(r, pos: np.ndarray, count: np.ndarray, k_init: np.ndarray, n: int
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Read the coded coefficients (indices below ``count``) of subframes starting at ``pos``.

    The inverse of :func:`coefficient_items`.  One vectorized step per
    codeword over every subframe still reading, each at its own coefficient
    index: one 64-bit gather gives the unary part, low bits and sign of a
    codeword of up to 57 bits; longer codewords and escapes take the general
    path.  Returns ``(q, end positions, malformed)``.
    """
    from ..entropy.rice import rice_k_from_context

    m = pos.size
    w1 = n + 1
    mag = np.zeros(m * w1, dtype=np.int64)  # rows of n + 1: column n absorbs bad run targets
    neg = np.zeros(m * w1, dtype=bool)
    bad = np.zeros(m, dtype=bool)
    pos = pos.copy()
    rows = np.arange(m)  # subframes still reading (compacted as they finish)
    p, cnt, jf, k0 = pos.copy(), count.copy(), np.zeros(m, np.int64), k_init
    # the last CONTEXT_WINDOW magnitudes of each subframe, most recent first
    hist = np.zeros((CONTEXT_WINDOW, m), dtype=np.int64)
    while True:
        act = jf < cnt
        if not act.any():
            break
        if act.sum() * 2 < rows.size:  # compact: drop finished subframes
            pos[rows] = p
            rows, p, cnt, jf, k0 = rows[act], p[act], cnt[act], jf[act], k0[act]
            hist, act = hist[:, act], act[act]
        tot = hist.sum(axis=0)
        have = np.minimum(jf, CONTEXT_WINDOW)
        if (have == CONTEXT_WINDOW).all():
            k = rice_k_from_context(tot, CONTEXT_WINDOW)
        else:
            k = np.where(jf == 0, k0, rice_k_from_context(tot, np.maximum(have, 1)))
        runm = act & (jf >= 1) & (tot == 0)
        p2 = p
        run = 0
        if runm.any():
            ri = np.flatnonzero(runm)
            v, used = read_exp_golomb(r, p[ri])
            run = np.zeros(rows.size, np.int64)
            run[ri] = v
            p2 = p.copy()
            p2[ri] += used
            k = k.copy()
            k[ri] = 0
        mg, sign, used = _codewords(r, p2, k, act, rows, bad)
        mg = mg + runm  # a run ends on a non-zero coefficient, sent as magnitude - 1
        nz = mg > 0
        target = jf + run
        over = act & (target >= cnt)
        if over.any():
            bad[rows[over]] = True
        target = np.where(act & ~over, target, n)
        flat = rows * w1 + target
        mag[flat] = np.where(act, mg, 0)
        neg[flat] = (sign == 1) & nz & act
        p = np.where(act, p2 + used + nz, p)
        jf = np.where(act, np.where(over, cnt, target + 1), jf)
        # context: a regular step shifts the history; a run leaves (m, 0, 0, 0)
        shifted = np.empty_like(hist)
        shifted[1:] = hist[:-1]
        shifted[0] = mg
        shifted[1:, runm] = 0
        hist = np.where(act, shifted, hist)
    pos[rows] = p
    mag, neg = mag.reshape(m, w1)[:, :n], neg.reshape(m, w1)[:, :n]
    return np.where(neg, -mag, mag), pos, bad



def _codewords(r, p2: np.ndarray, k: np.ndarray, act: np.ndarray, rows: np.ndarray,
               bad: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Magnitude, sign bit and bits used of the Rice codeword at each ``p2`` (parameter ``k``).

    One 64-bit gather reads a codeword of up to 57 bits; longer codewords and
    escapes take :func:`~codec.entropy.rice.read_rice_escape`, and a malformed one marks its
    subframe in ``bad`` (indexed through ``rows``).
    """
    from ..entropy.bits import bit_length as _bit_length

    pc = np.minimum(p2, r.size_bits)
    w = r.peek(pc)
    qq = 33 - _bit_length((w >> np.uint64(31)).astype(np.int64))
    ku = k.astype(np.uint64)
    low = ((w << (qq + 1).astype(np.uint64)) >> np.uint64(1)) >> (63 - ku)
    mg = (qq << k) | low.astype(np.int64)
    sign = (w << ((qq + 1 + k).astype(np.uint64) % np.uint64(64))) >> np.uint64(63)
    used = qq + 1 + k
    slow = act & ((qq >= 32) | (qq + k + 2 > 57))
    if slow.any():
        sl = np.flatnonzero(slow)
        mv, uv = read_rice_escape(r, p2[sl], k[sl])
        bad[rows[sl[mv < 0]]] = True
        mv = np.maximum(mv, 0)
        mg[sl] = mv
        used[sl] = uv
        sign[sl] = r.read(p2[sl] + uv, 1).astype(np.uint64)
    return mg, sign, used


#: Rounding offsets tried per frame (0.5: nearest; smaller: wider dead zone).
RD_OFFSETS = (0.5, 0.36)
_RD_BLOCK = 4096
#: Frames packed per call: temporaries stay in cache.
PACK_BLOCK = 4096


def rate_fidelity_choice(cx, mean, dc, budget, n):
    """Per frame, the (step code, rounding offset) pair that meets the budget in fewest bits.

    For each candidate offset the largest step that meets the budget is found,
    and the exact v2 payload size of the result is counted; the cheaper wins.
    """
    nf = cx.shape[0]
    if nf > _RD_BLOCK:  # frames are independent: work block by block so temporaries stay cached
        parts = [rate_fidelity_choice(cx[a : a + _RD_BLOCK],
                                      None if mean is None else mean[a : a + _RD_BLOCK],
                                      dc, budget[a : a + _RD_BLOCK], n)
                 for a in range(0, nf, _RD_BLOCK)]
        return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])
    best_code = best_off = best_bits = None
    for off in RD_OFFSETS:
        code = choose_steps(cx, mean, dc, budget, off, hint=best_code)
        q, mean_int, _ = code_frame(cx, mean, dc, code, off)
        bits = payload_bits_v2(q, mean_int, n)
        if best_bits is None:
            best_code, best_off, best_bits = code, np.full(code.size, off), bits
            continue
        better = bits < best_bits
        best_code = np.where(better, code, best_code)
        best_off = np.where(better, off, best_off)
        best_bits = np.where(better, bits, best_bits)
    return best_code, best_off


def _pack_v2(c: CodedFrames, key: FrameKey) -> PackedFrames:
    """Layout v2 frames with bits per subframe and the header bits of the stream."""
    rows = c.channel.size
    if c.multi:
        frame = np.unique(c.sequence, return_inverse=True)[1]
        first = np.flatnonzero(np.r_[True, frame[1:] != frame[:-1]])
    else:
        frame = np.arange(rows)
        first = frame
    parts = []
    bounds = np.r_[first, rows]
    for a in range(0, first.size, PACK_BLOCK):
        b = min(a + PACK_BLOCK, first.size)
        r0, r1 = bounds[a], bounds[b]
        fs = first[a:b]
        batch = FrameBatchV2(
            multi=np.full(b - a, c.multi), channel=c.channel[fs], sequence=c.sequence[fs],
            valid=c.valid[fs], frame=frame[r0:r1] - frame[r0], step_code=c.step_code[r0:r1],
            mean=None if c.mean is None else c.mean[r0:r1], q=c.q[r0:r1])
        parts.append(pack_frames_v2(batch, c.profile_id, c.n, key=key))
    data = b"".join(p[0] for p in parts)
    lengths, sub_bits, side_bits = (np.concatenate([p[i] for p in parts]) for i in (1, 2, 3))
    cnt = np.bincount(frame, minlength=first.size)
    overhead = lengths * 8 - np.add.reduceat(sub_bits, first)
    bits = sub_bits + (overhead // cnt)[frame]
    bits[first] += overhead - (overhead // cnt) * cnt
    coef_bits = sub_bits - side_bits
    return PackedFrames(data, bits, int(lengths.sum() * 8 - coef_bits.sum()), frame)


class Layout2:
    """Layout 2: adaptive Rice codes, one window (of one or every channel) per frame.

    Kept for senders that cannot run a range coder: every codeword is made
    with shifts and adds from a 4-coefficient context.
    """

    version = LAYOUT_VERSION_2
    sequence_bits = 8
    length_field = LengthField("flagged", MIN_V2_BYTES)
    supports_frame_scope = False
    has_trellis = False
    spends_slack = False

    def windows_per_frame(self, profile) -> int:
        return 1

    def max_frame_bytes(self, profile) -> int:
        return max_frame_bytes_for(profile, 1)

    def choose_codes(self, cx, mean, dc, budget, n):
        return rate_fidelity_choice(cx, mean, dc, budget, n)

    def block_offset(self) -> float:
        return RD_OFFSETS[0]

    def pack(self, coded: CodedFrames, key: FrameKey) -> PackedFrames:
        return _pack_v2(coded, key)

    def parse(self, data: bytes, offsets: np.ndarray, lengths: np.ndarray,
              ctx: ParseContext) -> ParsedFrames:
        return parse_checked(
            lambda d, o, ln, c: parse_frames_v2(d, o, ln, c.n, c.channels, c.has_mean),
            data, offsets, lengths, ctx)


LAYOUT_2 = register_layout(Layout2())
