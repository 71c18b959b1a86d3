"""Lane-parallel range coder for coefficient payloads (frame layout version 3).

A *range coder* (G. N. N. Martin 1979), the byte-oriented form of arithmetic
coding (Witten, Neal & Cleary 1987), narrows an integer interval ``[low, low +
range)`` by each symbol's share of a cumulative-frequency table and ships the
top byte of ``low`` whenever ``range`` falls below 2**24.  Here every frame is
an independent *lane*: step k codes operation k of every lane at once with
NumPy integer state arrays, so the cost is in the number of steps, not of
frames.

Operations are ``(cum, freq, shift)``: with ``r = range >> shift`` the
interval becomes ``low += r * cum``, ``range = r * freq``.  A model symbol uses
``shift = TOTAL_BITS`` and a row of a cumulative table; ``w`` equiprobable
("bypass") bits of a value ``v`` are ``(v, 1, w)``, w <= 16.

State: ``low`` < 2**32 after each step, 2**24 <= ``range`` < 2**32 between
steps.  A carry out of ``low`` is added to the lane's bytes already written.
At the end one byte of ``low`` rounded up to a multiple of 2**24 is written,
and trailing zero bytes are dropped: the decoder reads zeros past a lane's end.

Coefficient model (all integer, the same on every machine): magnitude
``|q_j|`` of coefficient j >= 1 gets a context class from the sum S of the
previous min(j, 4) magnitudes of the same subframe and from the octave of
j / N (:func:`context_class`); the class fixes a shift ``s`` and a
zero-modified geometric law (:func:`geometric_cum`).  The
high part ``|q| >> s`` is a model symbol 0 .. M-1, or the escape M followed by
the bit length of ``hi - M`` (uniform table) and its bits below the leading
one; then ``s`` low bits and, for a non-zero, a sign bit are bypass bits.
Coefficient 0 sends the bit length of ``|q|`` (uniform table), the bits below
its leading one and a sign bit.

References
----------
G. N. N. Martin, "Range encoding: an algorithm for removing redundancy from a
digitised message", Video & Data Recording Conference, Southampton, 1979.
I. H. Witten, R. M. Neal and J. G. Cleary, "Arithmetic coding for data
compression", Commun. ACM 30(6), 1987.
"""

from __future__ import annotations

import functools
import math
from typing import NamedTuple

import numpy as np

from ..quantize.trellis import TRANSITIONS, quantizer_ids
from .bits import bit_length as _bit_length
from .range_tables import (
    CELL_PARAMS,
    SCALE_PARAMS,
    TRELLIS_CELL_PARAMS,
    TRELLIS_SCALE_PARAMS,
)
from .rice import CONTEXT_WINDOW, preceding_sums

__all__ = [
    "TOTAL_BITS",
    "MODEL_SYMBOLS",
    "CONTEXT_WINDOW",
    "geometric_cum",
    "context_class",
    "band_class",
    "CUM",  # noqa: F822 - built on first use (module __getattr__)
    "TRELLIS_BASE",
    "SHIFT",  # noqa: F822 - built on first use (module __getattr__)
    "LEN_ROW",
    "MEAN_LEN_ROW",
    "encode_lanes",
    "RangeDecoder",
    "coefficient_ops",
    "coefficient_cost_bits",
    "zero_tail_bits",
    "decode_coefficients",
]

TOTAL_BITS = 15
TOTAL = 1 << TOTAL_BITS
#: Model symbols 0 .. M-1 of the high part; symbol M is the escape.
MODEL_SYMBOLS = 64
_TOP = 1 << 24
_MASK32 = (1 << 32) - 1
_BYPASS_MAX = 16


def geometric_cum(a: int, z: int = 0, m: int = MODEL_SYMBOLS, total: int = TOTAL) -> list[int]:
    """Cumulative frequencies of a zero-modified geometric law on 0..m-1, plus escape m.

    P(0) is about ``z / 2**16`` (with ``z = 0``: a plain geometric law) and the
    magnitudes from 1 on fall with ratio ``theta = a / 2**16``.  With ``R = total
    - m - 1``, ``R0 = (R z) >> 16`` (or ``R (1 - theta)`` rounded down when z = 0)
    and ``R1 = R - R0``: ``cum[0] = 0``, ``cum[i] = R0 + floor(R1 (1 - theta**(i-1)))
    + i`` for i = 1..m and ``cum[m + 1] = total``, so every symbol has frequency
    >= 1.  Exact Python integers (``theta**i = a**i / 2**(16 i)``): both ends
    build the same table on any machine.
    """
    r = total - m - 1
    r0 = (r * z) >> 16 if z else (r * ((1 << 16) - a)) >> 16
    r1 = r - r0
    cum = [0] + [r0 + ((r1 * ((1 << (16 * (i - 1))) - a ** (i - 1))) >> (16 * (i - 1))) + i
                 for i in range(1, m + 1)]
    return cum + [total]


def _uniform_cum(m: int = MODEL_SYMBOLS, total: int = TOTAL) -> list[int]:
    """Equal frequencies on 0..m-1 (bit lengths 0..63); row width m + 2 (last entry repeated)."""
    return [(total * i) // m for i in range(m + 1)] + [total]


# Context classes: a scale class from the recent magnitudes (0 for S = 0, then
# 1 + half-octaves of u = 16 S / count, 16 x their mean) times a band class
# from the coefficient's relative position j / N (octaves of 256 j / N), since
# a spectrum falls with frequency at a given local scale.
_SCALES = 121
_BANDS = 8
_CLASSES = _SCALES * _BANDS
#: Layout 4 (dependent quantization) classes: ``TRELLIS_BASE * (1 + quantizer) + class``.
TRELLIS_BASE = _CLASSES

# (s, z, a) per (scale, band) cell and per scale, and layout 4's per (quantizer, scale,
# band) and per (quantizer, scale): fitted by tools/fit_range_model.py, which writes
# them to their own generated module.


def _class_params(scale: int, band: int) -> tuple[int, int, int]:
    """(s, z, a) of a (scale, band) cell."""
    if (scale, band) in CELL_PARAMS:
        return CELL_PARAMS[(scale, band)]
    if scale < len(SCALE_PARAMS):
        return SCALE_PARAMS[scale]
    base = len(SCALE_PARAMS) - 2
    s, z, a = SCALE_PARAMS[base + (scale - base) % 2]
    return s + (scale - base) // 2, z, a


def _trellis_params(qid: int, scale: int, band: int) -> tuple[int, int, int]:
    """(s, z, a) of a (quantizer, scale, band) cell of layout 4."""
    if (qid, scale, band) in TRELLIS_CELL_PARAMS:
        return TRELLIS_CELL_PARAMS[(qid, scale, band)]
    own = TRELLIS_SCALE_PARAMS[qid]
    if scale < len(own):
        return own[scale]
    base = len(own) - 2
    s, z, a = own[base + (scale - base) % 2]
    return s + (scale - base) // 2, z, a


def _build_tables():
    rows, shifts, cache = [], [], {}
    cells = [_class_params(c // _BANDS, c % _BANDS) for c in range(_CLASSES)]
    cells += [_trellis_params(t, c // _BANDS, c % _BANDS) for t in (0, 1)
              for c in range(_CLASSES)]
    for s, z, a in cells:
        if (z, a) not in cache:
            cache[(z, a)] = geometric_cum(a, z)
        rows.append(cache[(z, a)])
        shifts.append(s)
    rows.append(_uniform_cum())
    shifts.append(0)
    rows.append(_mean_len_cum())
    shifts.append(0)
    return np.array(rows, dtype=np.int64), np.array(shifts, dtype=np.int64)


def _mean_len_cum() -> list[int]:
    """Bit lengths of coefficient 0 when the subframe sends its mean (reference ac).

    The mean then lives in the mean field, and for a basis whose first vector
    is constant (dct, legendre, haar, walsh) coefficient 0 holds only the
    mean's rounding error, below half a step: its code is 0.  A zero-modified
    geometric law with P(0) = 7/8 and ratio 3/4 (round values chosen from that
    argument, not fitted) codes that 0 in 0.19 bits instead of the uniform
    table's 6; a wavelet's coefficient 0 of bit length 1 to 6 costs 5.0 to 6.7.
    Bit lengths 0 .. 63 (the last as the law's escape), width 66 like the
    uniform row.
    """
    return geometric_cum(3 << 14, 7 << 13, m=MODEL_SYMBOLS - 1) + [TOTAL]


#: Rows of the model: one per class of the three table sets (layout 3's, then layout
#: 4's for each quantizer), then the uniform bit-length table and the bit-length
#: table of coefficient 0 beside a mean; every row has ``_W`` entries.
LEN_ROW = 3 * _CLASSES
MEAN_LEN_ROW = LEN_ROW + 1
_W = MODEL_SYMBOLS + 2


class _Model(NamedTuple):
    cum: np.ndarray  # cumulative tables, one row per class (CUM)
    shift: np.ndarray  # the shift s of each row (SHIFT)
    flat: np.ndarray  # cum.ravel()
    cost: np.ndarray  # cost in bits of each (row, symbol): -log2(freq / TOTAL)


@functools.cache
def _model() -> _Model:
    """The model tables, built on first use: importing the coder stays cheap."""
    cum, shift = _build_tables()
    if cum.shape != (MEAN_LEN_ROW + 1, _W):
        raise RuntimeError("range model tables have an unexpected shape")  # our bug
    with np.errstate(divide="ignore"):
        cost = TOTAL_BITS - np.log2(np.diff(cum, axis=1).astype(np.float64))
    return _Model(cum, shift, cum.ravel(), cost)


_LAZY = {"CUM": "cum", "SHIFT": "shift", "_FLAT": "flat", "_COST": "cost"}


def __getattr__(name: str):
    """``CUM`` and ``SHIFT`` (and the private ``_FLAT``, ``_COST``), built on first use."""
    if name in _LAZY:
        return getattr(_model(), _LAZY[name])
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def context_class(total: np.ndarray, count: np.ndarray, j: np.ndarray, n: int) -> np.ndarray:
    """Model class of coefficient j >= 1 of N = ``n`` from the sum of the previous ``count``."""
    total = np.asarray(total, dtype=np.int64)
    return _classes(total, (total << 4) // np.maximum(count, 1), band_class(j, n))


def band_class(j: np.ndarray, n: int) -> np.ndarray:
    """Octave of 256 j / N, 0 .. 7."""
    return np.clip(_bit_length((np.asarray(j, dtype=np.int64) << 8) // n) - 1, 0, _BANDS - 1)


def _classes(total: np.ndarray, u: np.ndarray, band: np.ndarray) -> np.ndarray:
    bl = np.frexp(u.astype(np.float64))[1]  # exact bit length below 2**53
    bl = bl.astype(np.int64)
    h = (u >> np.maximum(bl - 2, 0)) & 1
    scale = np.clip(2 * bl + h - 5, 1, _SCALES - 1)  # 1 + 2 (bl - 3) + h
    return np.where(total == 0, 0, scale) * _BANDS + band


def _contexts(mag: np.ndarray) -> np.ndarray:
    """Class of every coefficient of every row (column 0: -1, coded on its own)."""
    ns, n = mag.shape
    j = np.arange(1, n)
    total = preceding_sums(mag, CONTEXT_WINDOW)
    count = np.minimum(j, CONTEXT_WINDOW)  # magnitudes in each sum
    band = band_class(j, n)
    cls = np.full((ns, n), -1, dtype=np.int64)
    # sums below _CTX_LUT by table (as the decoder), larger ones computed
    cls[:, 1:] = _scale_lut()[np.minimum(total, _CTX_LUT - 1) + count * _CTX_LUT] + band
    big = np.nonzero(total >= _CTX_LUT)
    if big[0].size:
        t = total[big]
        cls[big[0], big[1] + 1] = _classes(t, (t << 4) // count[big[1]], band[big[1]])
    return cls


def _trellis_classes(mag: np.ndarray, q: np.ndarray, trellis) -> np.ndarray:
    """Classes of every row; rows flagged in ``trellis`` (bool or per-row) use layout 4's sets."""
    cls = _contexts(mag)
    if trellis is None or not np.any(trellis):
        return cls
    rows = np.flatnonzero(np.broadcast_to(np.asarray(trellis, dtype=bool), (q.shape[0],)))
    # the table set of each level's quantizer: 0 -> TRELLIS_BASE, 1 -> 2 TRELLIS_BASE
    cls[rows, 1:] += TRELLIS_BASE * (1 + quantizer_ids(q[rows])[:, 1:])
    return cls


def coefficient_ops(q: np.ndarray, count: np.ndarray, trellis=None, mean: bool = False,
                    order: np.ndarray | None = None):
    """Coding operations of the coded coefficients (j < count) of each row of ``q``.

    Returns ``(cum, freq, shift, row)`` flat in row-major order (rows in order,
    coefficients in order), ``row`` giving each operation's row.  With
    ``order`` the rows are taken in that order (``row`` then indexes
    ``order``), gathered block by block rather than copied whole.  Per
    coefficient: the model symbol; on escape (or for coefficient 0) the bit
    length symbol and the bits below the leading one; the ``s`` low bits; the
    sign of a non-zero.  Rare operations are built only where present.
    ``trellis`` (a bool, or one per row): rows of levels of dependent
    quantization (layout 4), whose classes also name each level's quantizer.
    ``mean``: the subframes send a mean (reference ac), so coefficient 0's
    bit length uses the row ``MEAN_LEN_ROW``.
    """
    ns, n = q.shape
    rows = max(1, _OPS_CELLS // max(n, 1))
    if ns <= rows and order is None:
        return _row_ops(q, count, trellis, mean)
    parts = []
    small = np.int32 if ns < 2**31 else np.int64  # the row numbers stay under 32 MB
    for a in range(0, ns, rows):  # blocks of rows: the temporaries stay in the CPU cache
        at = slice(a, a + rows) if order is None else order[a : a + rows]
        tr = trellis if trellis is None or np.ndim(trellis) == 0 else trellis[at]
        cum, freq, shift, row = _row_ops(q[at], count[at], tr, mean)
        parts.append((cum, freq, shift, (row + a).astype(small)))
    return tuple(np.concatenate(x) for x in zip(*parts))


#: Coefficients per block of rows in :func:`coefficient_ops`.
_OPS_CELLS = 1 << 17


def _row_ops(q: np.ndarray, count: np.ndarray, trellis, mean: bool):
    """:func:`coefficient_ops` of one block of rows."""
    model = _model()
    ns, n = q.shape
    mag2 = np.abs(q).astype(np.int64)
    cls2 = _trellis_classes(mag2, q, trellis)
    flat = np.flatnonzero((np.arange(n) < count[:, None]).ravel())
    row = flat // n
    first = (flat % n) == 0
    mag = mag2.ravel()[flat]
    cls = cls2.ravel()[flat]
    neg = q.ravel()[flat] < 0
    s = np.where(first, 0, model.shift[np.maximum(cls, 0)])
    hi = mag >> s
    esc = ~first & (hi >= MODEL_SYMBOLS)
    big = first | esc
    sym = np.minimum(hi, MODEL_SYMBOLS)
    fi = np.flatnonzero(first)
    sym[fi] = _bit_length(mag[fi])  # coefficient 0: its bit length
    tab = np.where(first, MEAN_LEN_ROW if mean else LEN_ROW, cls) * _W + sym
    bi = np.flatnonzero(big)
    e = np.where(first[bi], mag[bi], hi[bi] - MODEL_SYMBOLS)
    eb = _bit_length(e)
    ew = np.maximum(eb - 1, 0)
    ev = e & ((np.int64(1) << ew) - 1)
    nz = mag > 0
    ce = np.zeros(mag.size, np.int64)
    ce[bi] = (ew + _BYPASS_MAX - 1) // _BYPASS_MAX
    cl = (s + _BYPASS_MAX - 1) // _BYPASS_MAX
    nops = 1 + esc + ce + cl + nz
    base = np.cumsum(nops) - nops
    total = int(nops.sum())
    # small types (cum < 2**16, freq <= 2**15, shift <= 16): less memory traffic
    cum = np.empty(total, np.int32)
    freq = np.ones(total, np.int32)
    shift = np.empty(total, np.int8)
    cum[base] = model.flat[tab]
    freq[base] = model.flat[tab + 1] - model.flat[tab]
    shift[base] = TOTAL_BITS
    at = base + 1
    # escape: bit length of hi - M from the uniform table
    ei = np.flatnonzero(esc)
    if ei.size:
        fe = LEN_ROW * _W + eb[np.searchsorted(bi, ei)]
        cum[at[ei]] = model.flat[fe]
        freq[at[ei]] = model.flat[fe + 1] - model.flat[fe]
        shift[at[ei]] = TOTAL_BITS
        at[ei] += 1
    for idx, v, w in ((bi, ev, ew), (np.flatnonzero(cl), None, None)):
        if not idx.size:
            continue
        if v is None:  # the s low bits
            w = s[idx]
            v = mag[idx] & ((np.int64(1) << w) - 1)
        rem = w.copy()
        while (rem > 0).any():  # chunks of <= 16 bits, most significant first
            cw = np.minimum(rem, _BYPASS_MAX)
            rem = rem - cw
            k = np.flatnonzero(cw > 0)
            pos = at[idx[k]]
            cum[pos] = (v[k] >> rem[k]) & ((np.int64(1) << cw[k]) - 1)
            shift[pos] = cw[k]
            at[idx[k]] += 1
    zi = np.flatnonzero(nz)
    cum[at[zi]] = neg[zi]
    shift[at[zi]] = 1
    return cum, freq, shift, np.repeat(row, nops)


def coefficient_cost_bits(q: np.ndarray, count: np.ndarray | None = None,
                          trellis=None, mean: bool = False) -> np.ndarray:
    """Ideal code length in bits, -sum log2 p, of each row's coded coefficients.

    Used by the encoder's rate choice; the range coder spends this plus at most
    a few bits per lane.  ``count`` defaults to last non-zero + 1; ``mean`` as in
    :func:`coefficient_ops`.
    """
    ns, n = q.shape
    model = _model()
    mag = np.abs(q).astype(np.int64)
    if count is None:
        nzr = mag > 0
        count = np.where(nzr.any(axis=1), n - np.argmax(nzr[:, ::-1], axis=1), 0)
    cls = _trellis_classes(mag, q, trellis)
    coded = np.arange(n) < count[:, None]
    s = model.shift[np.maximum(cls, 0)]
    s[:, 0] = 0
    hi = mag >> s
    esc = hi >= MODEL_SYMBOLS
    esc[:, 0] = False
    sym = np.minimum(hi, MODEL_SYMBOLS)
    bl0 = _bit_length(mag[:, 0])
    sym[:, 0] = bl0
    row_cls = cls.copy()
    row_cls[:, 0] = MEAN_LEN_ROW if mean else LEN_ROW
    bits = model.cost[row_cls, sym] + s + (mag > 0)
    eb = _bit_length(np.where(esc, hi - MODEL_SYMBOLS, 0))
    bits += np.where(esc, model.cost[LEN_ROW, 0] + np.maximum(eb - 1, 0), 0)
    bits[:, 0] += np.maximum(bl0 - 1, 0)
    return np.where(coded, bits, 0.0).sum(axis=1)


def zero_tail_bits(q: np.ndarray, count: np.ndarray, mean: bool = False) -> np.ndarray:
    """Ideal bits of coding each row's zeros at coefficients ``count`` .. N - 1 as well.

    What coding every coefficient of a row costs beyond its first ``count``
    (all of them zero): :func:`coefficient_cost_bits` with count N minus
    with ``count``, in O(rows) work instead of O(rows x N).  Past the first
    ``CONTEXT_WINDOW`` zeros the context sum is 0, so those costs come from
    one suffix sum per N; the first few take their context from the row's
    last magnitudes.  Layout 7's choice of dropping a frame's count fields.

    Examples
    --------
    >>> q = np.array([[5, -2, 1, 0, 0, 0, 0, 0]])
    >>> tail = zero_tail_bits(q, np.array([3]))
    >>> full = coefficient_cost_bits(q, np.array([8])) - coefficient_cost_bits(q, np.array([3]))
    >>> bool(np.isclose(tail[0], full[0]))
    True
    """
    model = _model()
    ns, n = q.shape
    count = np.asarray(count, dtype=np.int64)
    j = np.arange(n)
    band = band_class(np.maximum(j, 1), n)  # class of a zero after CONTEXT_WINDOW zeros
    c0 = model.cost[band, 0] + model.shift[band]
    c0[0] = model.cost[MEAN_LEN_ROW if mean else LEN_ROW, 0]
    suffix = np.r_[np.cumsum(c0[::-1])[::-1], 0.0]
    bits = suffix[np.minimum(count + CONTEXT_WINDOW, n)]
    # the magnitudes just before the tail: mag[count - W + k], k = 0 .. W - 1 (0 before j = 0)
    col = count[:, None] - CONTEXT_WINDOW + np.arange(CONTEXT_WINDOW)
    last = np.where(col >= 0, np.abs(q[np.arange(ns)[:, None], np.maximum(col, 0)]), 0)
    for d in range(CONTEXT_WINDOW):
        jj = count + d
        on = jj < n
        total = last[:, d:].sum(axis=1)
        cls = context_class(total, np.minimum(jj, CONTEXT_WINDOW), np.maximum(jj, 1), n)
        here = np.where(jj == 0, c0[0], model.cost[cls, 0] + model.shift[cls])
        bits = bits + np.where(on, here, 0.0)
    return bits


def encode_lanes(cum: np.ndarray, freq: np.ndarray, shift: np.ndarray, lane: np.ndarray,
                 lanes: int) -> tuple[np.ndarray, np.ndarray]:
    """Range-code the operations of every lane; return (bytes of all lanes, bytes per lane).

    ``lane`` gives each operation's lane, non-decreasing; operations of a lane
    are coded in order.  The lanes' bytes come back concatenated in lane order.

    The coder is split in two exact parts.  ``range`` never depends on ``low``,
    so one pass over the steps (every lane at once) runs the ``range``
    recurrence alone and records, per operation, ``r = range >> shift`` and how
    many bytes the lane had shifted out before it.  ``low`` with its carries
    is then one long addition: each operation adds ``r * cum`` at that byte
    position of the lane's number, so the bytes are the base-256 digits of the
    sum of all terms, found for every operation at once
    (:func:`_lane_digits`).  The result is the byte-wise coder of the module
    docstring, carry for carry.
    """
    lane = np.asarray(lane, dtype=np.int64)
    nops = np.bincount(lane, minlength=lanes).astype(np.int64)
    order, rank, active, sstart = _step_plan(nops)
    sf = (np.asarray(freq, dtype=np.int32) << 5) | np.asarray(shift, dtype=np.int32)
    cum = np.asarray(cum, dtype=np.int32)
    first = (np.cumsum(nops) - nops)[order]
    if lanes * active.size <= 2 * lane.size:
        # lanes of similar lengths: each lane's operations in a row of a padded table
        # (rows longest first), so step k reads column k in place, without an index
        width = active.size
        small = np.int32 if lanes * width < 2**31 else np.int64  # under 32 MB: no fresh pages
        at = (np.repeat((rank * width - (np.cumsum(nops) - nops)).astype(small), nops)
              + np.arange(lane.size, dtype=small))
        ops = []
        for v in (sf, cum):
            t = np.zeros(lanes * width, np.int32)
            t[at] = v
            ops.append(t.reshape(lanes, width))
        term, before, nbytes = _range_steps(*ops, None, active, sstart)
    else:
        term, before, nbytes = _range_steps(sf, cum, first, active, sstart)
    return _lane_digits(term, before, nbytes, order, rank, active, sstart)


def _step_plan(nops: np.ndarray):
    """Lanes longest first (``order``; ``rank`` of each lane in it), the number of lanes
    still active at each step and where each step starts in step-major order."""
    lanes = nops.size
    order = np.argsort(-nops, kind="stable")
    rank = np.empty(lanes, np.int64)
    rank[order] = np.arange(lanes)
    steps = int(nops.max(initial=0))
    active = lanes - np.searchsorted(np.sort(nops), np.arange(steps), side="right")
    sstart = np.cumsum(active) - active
    return order, rank, active, sstart


def _range_steps(sf: np.ndarray, cum: np.ndarray, first: np.ndarray, active: np.ndarray,
                 sstart: np.ndarray):
    """The ``range`` recurrence of every lane, step by step.

    ``sf`` (freq << 5 | shift) and ``cum`` per operation, in lane order; lane
    ``i`` (longest first) starts at operation ``first[i]`` (or, with ``first``
    None, ``sf`` and ``cum`` are tables with a row per lane, longest first, and
    column k holds operation k).  Returns, in step-major order, each
    operation's term ``(range >> shift) * cum`` and the bytes its lane had
    shifted out before it, and per lane (longest first) the bytes shifted out.
    Step k reads operation k of every lane: neighbouring steps read neighbouring
    operations, so the reads stay in the CPU cache.
    """
    lanes = sf.shape[0] if first is None else first.size
    rng = np.full(lanes, _MASK32, dtype=np.int64)
    shifted = np.zeros(lanes, dtype=np.int64)
    before = np.empty(int(active.sum()), np.int32)
    # the terms (exact floats: every term is below 2**32) in pieces of _SUM_CHUNK
    term = [np.empty(s1 - s0) for _, _, s0, s1 in _sum_chunks(active, sstart)]
    act, start = active.tolist(), sstart.tolist()
    for (k0, k1, s0, _), piece in zip(_sum_chunks(active, sstart), term):
        for k in range(k0, k1):
            a, s = act[k], start[k]
            if first is None:
                p, c = sf[:a, k], cum[:a, k]
            else:
                idx = first[:a] + k
                p, c = sf[idx], cum[idx]
            r = rng[:a] >> (p & 31)
            np.multiply(r, c, out=piece[s - s0 : s - s0 + a])
            nr = r * (p >> 5)
            before[s : s + a] = shifted[:a]
            # renormalisation: range stays >= 2**8 after a step, so at most two bytes
            nb = (nr < _TOP).view(np.int8) + (nr < (1 << 16)).view(np.int8)
            shifted[:a] += nb
            np.left_shift(nr, nb << 3, out=rng[:a])
    return term, before, shifted


def _sum_chunks(active: np.ndarray, sstart: np.ndarray) -> list[tuple[int, int, int, int]]:
    """Runs of whole steps (k0, k1) of about _SUM_CHUNK operations, and where their
    operations sit in step-major order (s0, s1)."""
    out, k0 = [], 0
    while k0 < active.size:
        k1 = int(np.searchsorted(sstart, sstart[k0] + _SUM_CHUNK, side="right"))
        k1 = max(k1, k0 + 1)
        out.append((k0, k1, int(sstart[k0]), int(sstart[k1 - 1] + active[k1 - 1])))
        k0 = k1
    return out


#: Step-major operations per pass when the terms are summed: temporaries stay small.
_SUM_CHUNK = 1 << 20


def _lane_digits(term, before, nbytes, order, rank, active, sstart):
    """The bytes of every lane from the terms (see :func:`encode_lanes`), step-major.

    Lane i's number occupies one guard digit and ``nbytes + 4`` digits (the four
    of the final ``low``), most significant first; a term of an operation after
    ``b`` shifted-out bytes has its lowest byte at digit ``b + 3``.  The flush
    adds ``2**24 - 1`` to the final ``low`` and keeps its top byte, digit
    ``nbytes``; trailing zero bytes are dropped (the decoder reads zeros past
    the end).
    """
    lanes = order.size
    own = nbytes[rank]  # per lane, in lane order
    size = own + 5
    base = np.cumsum(size) - size
    rb = base[order] + 4  # lowest digit of a term at b = 0, per rank
    acc = np.zeros(int(size.sum()), dtype=np.float64)
    # a piece of steps at a time; terms < 2**32 and their sums at one digit < 2**32 are
    # exact in floating point (the terms at one digit all narrow one interval)
    for (k0, k1, s0, s1), piece in zip(_sum_chunks(active, sstart), term):
        # the lane of each operation: step k holds ranks 0 .. active[k] - 1
        pos = np.concatenate([rb[:a] for a in active[k0:k1].tolist()]) + before[s0:s1]
        acc += np.bincount(pos, weights=piece, minlength=acc.size)
    acc[base + own + 4] += _TOP - 1  # the flush
    digits = _carry(acc.astype(np.int64))
    if digits[base].any():
        raise RuntimeError("range coder carried out of a lane")  # our bug
    # each lane's bytes: digits 1 .. nbytes + 1 of its number, trailing zeros dropped
    keep = own + 1
    owner = np.repeat(np.arange(lanes), keep)
    off = np.arange(int(keep.sum())) - np.repeat(np.cumsum(keep) - keep, keep)
    vals = digits[np.repeat(base + 1, keep) + off]
    nz = np.flatnonzero(vals)
    length = np.zeros(lanes, dtype=np.int64)
    last = np.r_[owner[nz][1:] != owner[nz][:-1], True] if nz.size else nz
    length[owner[nz][last]] = off[nz][last] + 1
    return vals[off < np.repeat(length, keep)].astype(np.uint8), length


def _carry(a: np.ndarray) -> np.ndarray:
    """Base-256 digits (most significant first) of a number whose digits may exceed 255."""
    while True:
        c = a >> 8
        if not c[1:].any():
            break
        a &= 0xFF
        a[:-1] += c[1:]
        if (c <= 1).all():
            break
    # every digit is now <= 256: a 256 sends a carry left through any run of 255s
    n = a.size
    idx = np.where(a != 0xFF, np.arange(n), n)
    nxt = np.minimum.accumulate(idx[::-1])[::-1]  # nearest digit at or right of each not 255
    gen = np.r_[a, 0] == 0x100
    carry_in = np.r_[gen[np.r_[nxt[1:], n]]]  # carry into digit p: from nxt[p + 1]
    return (a + carry_in) & 0xFF


# Symbol of every (table, value t >> _LUT_DROP): most t decode with one lookup.  Many
# classes share a table, so the lookup is built once per distinct table.
_LUT_DROP = 3


@functools.cache
def _lut():
    """The decoder's lookup, built on first use (encoding never needs it).

    One ``searchsorted`` over every distinct table at once: row c is shifted by
    ``c * 2 * TOTAL``, above every value and query of the rows before it.
    """
    tables, row_of = np.unique(_model().cum, axis=0, return_inverse=True)
    width = TOTAL >> _LUT_DROP
    t = np.arange(width, dtype=np.int64) << _LUT_DROP
    shift = (2 * TOTAL) * np.arange(tables.shape[0], dtype=np.int64)[:, None]
    flat = (tables + shift).ravel()
    first = (tables.shape[1] * np.arange(tables.shape[0], dtype=np.int64))[:, None] + 1
    lo = np.searchsorted(flat, t + shift, side="right") - first
    hi = np.searchsorted(flat, t + (1 << _LUT_DROP) - 1 + shift, side="right") - first
    return lo.astype(np.int8).ravel(), (lo == hi).ravel(), row_of.ravel() * width


#: ``x.any()`` without the Python wrapper of the method (called a few times per symbol).
_any = np.logical_or.reduce


@functools.cache
def _decoder_tables() -> tuple[np.ndarray, np.ndarray]:
    """The flat model table and the lookup cells that need a search (``~exact``)."""
    return _model().flat, ~_lut()[1]


class RangeDecoder:
    """Decoder state for many lanes at once; lane i reads ``data[start[i] : end[i]]``.

    Bytes past a lane's end read as zero.  ``bad`` marks lanes whose state
    became impossible (a corrupt lane that still passed its CRC); ``reads``
    counts the bytes each lane took after its first four.  ``lanes``
    arguments are index arrays or slices into the lane arrays; the ``*_prefix``
    methods work on lanes ``0 .. a - 1`` with one value per lane (a width of
    0 bits leaves a lane as it is), without index arrays.

    Internally the lanes' bytes are copied one after another, each followed by
    two zero bytes, and ``pos``/``end`` index that copy: a read at or past a
    lane's end is clamped to its first padding byte, and two bytes at a time
    come from one lookup of ``words`` (big-endian byte pairs).
    """

    def __init__(self, data: np.ndarray, start: np.ndarray, end: np.ndarray):
        data = np.asarray(data, dtype=np.uint8)
        start = np.asarray(start, dtype=np.int64)
        size = np.maximum(np.asarray(end, dtype=np.int64) - start, 0)
        room = size + 2
        base = np.cumsum(room) - room
        self.data = np.zeros(int(room.sum()) + 1, dtype=np.uint8)
        off = np.arange(int(size.sum())) - np.repeat(np.cumsum(size) - size, size)
        self.data[np.repeat(base, size) + off] = data[np.repeat(start, size) + off]
        d = self.data.astype(np.int64)
        self.words = (d[:-1] << 8) | d[1:]
        self.pos = base + 4
        self.end = base + size
        self.rng = np.full(start.size, _MASK32, dtype=np.int64)
        self.value = (self._word(base, self.end) << 16) | self._word(base + 2, self.end)
        self.bad = np.zeros(start.size, dtype=bool)
        self._first = base + 4

    @property
    def reads(self) -> np.ndarray:
        """Bytes each lane read after its first four (every read moves ``pos`` by one)."""
        return self.pos - self._first

    def _word(self, pos, end) -> np.ndarray:
        return self.words[np.minimum(pos, end)]

    def _renorm(self, lanes, rg: np.ndarray) -> None:
        # after a step range >= 2**8 (``rg``, just stored): at most two bytes
        nb = (rg < _TOP).view(np.int8) + (rg < (1 << 16)).view(np.int8)
        if not _any(nb):
            return
        sh = nb << 3
        p = self.pos[lanes]
        w = self._word(p, self.end[lanes])
        self.value[lanes] = (self.value[lanes] << sh) | (w >> (16 - sh))
        self.rng[lanes] = rg << sh
        self.pos[lanes] = p + nb

    def symbol(self, lanes, row: np.ndarray) -> np.ndarray:
        """Decode one model symbol per lane with cumulative table row ``row``."""
        r = self.rng[lanes] >> TOTAL_BITS
        val = self.value[lanes]
        t = np.minimum(val // r, TOTAL - 1)
        lut, lut_exact, lut_base = _lut()
        li = lut_base[row] + (t >> _LUT_DROP)
        s = lut[li].astype(np.int64)
        base = row * _W
        flat, inexact = _decoder_tables()
        slow = inexact[li]
        if _any(slow):  # t falls where a table step sits inside the lookup cell
            k = np.flatnonzero(slow)
            while True:
                more = (s[k] < _W - 2) & (flat[base[k] + s[k] + 1] <= t[k])
                if not _any(more):
                    break
                s[k] += more
        at = base + s
        c0 = flat[at]
        self._narrow(lanes, r, val - r * c0, r * (flat[at + 1] - c0))
        return s

    def bits(self, lanes, width) -> np.ndarray:
        """Decode a ``width``-bit bypass value per lane (0 <= width <= 16)."""
        r = self.rng[lanes] >> width
        val = self.value[lanes]
        v = np.minimum(val // r, (np.int64(1) << width) - 1)
        self._narrow(lanes, r, val - r * v, r)
        return v

    def long_bits(self, lanes, width: np.ndarray) -> np.ndarray:
        """A bypass value of up to 64 bits, as chunks of <= 16 bits, most significant first."""
        lanes = np.arange(self.rng.size)[lanes]
        out = np.zeros(lanes.size, dtype=np.int64)
        rem = np.asarray(width, dtype=np.int64).copy()
        while (rem > 0).any():
            cw = np.minimum(rem, _BYPASS_MAX)
            rem = rem - cw
            sel = cw > 0
            v = self.bits(lanes[sel], cw[sel])
            out[sel] = (out[sel] << cw[sel]) | v
        return out

    def sign_bits(self, a: int, width: np.ndarray) -> np.ndarray:
        """Whether the 1-bit value of each of lanes ``0 .. a - 1`` with ``width`` 1 is 1
        (:meth:`bits` with widths of 0 or 1, whose largest value is the width)."""
        lanes = slice(0, a)
        r = self.rng[lanes] >> width
        val = self.value[lanes]
        v = np.minimum(val // r, width)
        self._narrow(lanes, r, val - r * v, r)
        return v == 1

    def prefix_bits(self, a: int, width: np.ndarray) -> np.ndarray:
        """:meth:`long_bits` of lanes ``0 .. a - 1`` (width 0: nothing read)."""
        if np.maximum.reduce(width) <= _BYPASS_MAX:
            return self.bits(slice(0, a), width)
        return self.long_bits(slice(0, a), width)

    def _narrow(self, lanes, r, val, rng) -> None:
        bad = val >= rng
        if _any(bad):
            self.bad[np.arange(self.bad.size)[lanes][bad]] = True
            val = np.minimum(val, rng - 1)
        self.value[lanes] = val
        self.rng[lanes] = rng
        self._renorm(lanes, rng)


#: At most this many lanes still decoding: they finish one at a time in plain integers.
SCALAR_LANES = 8
_BIG_BITS = 53
_BIG = 1 << _BIG_BITS


@functools.cache
def _scalar_tables() -> tuple[list, list, list, list, list, list]:
    """The model and lookup tables as Python lists for :func:`_finish_scalar`, built on
    first use (like :func:`_lut`, so importing the coder stays cheap)."""
    lut, exact, base = _lut()
    model = _model()
    return (model.cum.tolist(), model.shift.tolist(), lut.tolist(), exact.tolist(), base.tolist(),
            TRANSITIONS.tolist())


def _finish_scalar(dec: RangeDecoder, active: int, k0: int, nsorted, lstart, sym_row, sym_j,
                   hist, state, q, n: int, trellis, mean: bool = False) -> None:
    """Decode symbols ``k0`` on of lanes ``0 .. active - 1``, one lane at a time.

    The same arithmetic as the vector loop of :func:`decode_coefficients`, step
    for step (every read, every renormalisation, the same refusals), so a frame
    decodes to the same codes whether its batch is large or small.
    """
    data = dec.data.tobytes()
    tr = None if trellis is None else trellis.tolist()
    for lane in range(active):
        a, b = int(lstart[lane]) + k0, int(lstart[lane] + nsorted[lane])
        one = _ScalarLane(dec, lane, data)
        one.run(sym_row[a:b].tolist(), sym_j[a:b].tolist(), hist[:, lane].tolist(),
                int(state[lane]), q, n, tr, MEAN_LEN_ROW if mean else LEN_ROW)
        one.store(dec, lane)


class _ScalarLane:
    """One lane's decoder state in plain integers (see :func:`_finish_scalar`)."""

    def __init__(self, dec: RangeDecoder, lane: int, data: bytes):
        self.data = data
        self.pos, self.end = int(dec.pos[lane]), int(dec.end[lane])
        self.rng, self.value = int(dec.rng[lane]), int(dec.value[lane])
        self.bad = bool(dec.bad[lane])
        self.cum_rows, self.shift, self.lut, self.exact, self.base, self.transitions = \
            _scalar_tables()

    def store(self, dec: RangeDecoder, lane: int) -> None:
        dec.pos[lane], dec.rng[lane], dec.value[lane] = self.pos, self.rng, self.value
        dec.bad[lane] = self.bad

    def narrow(self, val: int, new_rng: int) -> None:
        if val >= new_rng:
            self.bad = True
            val = new_rng - 1
        self.value, self.rng = val, new_rng
        for _ in range(3):
            if self.rng >= _TOP:
                break
            # bytes past the lane's end read as zero
            byte = self.data[self.pos] if self.pos < self.end else 0
            self.value = (self.value << 8) | byte
            self.pos += 1
            self.rng <<= 8

    def symbol(self, cls: int) -> int:
        r = self.rng >> TOTAL_BITS
        t = min(self.value // r, TOTAL - 1)
        li = self.base[cls] + (t >> _LUT_DROP)
        sym = self.lut[li]
        row_ = self.cum_rows[cls]
        if not self.exact[li]:
            while sym < _W - 2 and row_[sym + 1] <= t:
                sym += 1
        c0 = row_[sym]
        self.narrow(self.value - r * c0, r * (row_[sym + 1] - c0))
        return sym

    def bits(self, width: int) -> int:
        r = self.rng >> width
        v = min(self.value // r, (1 << width) - 1)
        self.narrow(self.value - r * v, r)
        return v

    def long_bits(self, width: int) -> int:
        out = 0
        while width > 0:
            cw = min(width, _BYPASS_MAX)
            width -= cw
            out = (out << cw) | self.bits(cw)
        return out

    def run(self, rows_l: list, js_l: list, h: list, st: int, q: np.ndarray, n: int,
            tr: list | None, first_row: int) -> None:
        """Decode the symbols of rows ``rows_l``, coefficients ``js_l``, into ``q``."""
        for row, j in zip(rows_l, js_l):
            if j == 0:
                h = [0, 0, 0, 0]
                st = 0
                cls, s = first_row, 0  # coefficient 0's bit length: its own table
            else:
                cls = _scalar_class(h, j, n)
                if tr is not None and tr[row]:
                    cls += TRELLIS_BASE * (1 + (st >> 1))
                s = self.shift[cls]
            sym = self.symbol(cls)
            mag = sym
            if j == 0 or sym == MODEL_SYMBOLS:
                eb = sym if j == 0 else self.symbol(LEN_ROW)
                low = self.long_bits(max(eb - 1, 0))
                e = ((1 << (eb - 1)) | low) if eb > 0 else 0
                mag = e if j == 0 else e + MODEL_SYMBOLS
            over = mag >= _BIG or (mag > 0 and mag.bit_length() + s > _BIG_BITS)
            if s:
                mag = (mag << s) | self.long_bits(s)
            if over:
                self.bad = True
                mag = 0
            val = mag
            if mag and self.bits(1) == 1:
                val = -mag
            q[row, j] = val
            if tr is not None:
                st = self.transitions[st][mag & 1]
            h = [mag, h[0], h[1], h[2]]


def _scalar_class(h: list, j: int, n: int) -> int:
    """:func:`context_class` of coefficient ``j`` >= 1 after magnitudes ``h`` (newest first)."""
    tot = h[0] + h[1] + h[2] + h[3]
    u = (tot << 4) // min(j, CONTEXT_WINDOW)
    bl = math.frexp(float(u))[1]  # as the vector path: float64 exponent
    hb = (u >> max(bl - 2, 0)) & 1
    band = min(max(((j << 8) // n).bit_length() - 1, 0), _BANDS - 1)
    scale = min(max(2 * bl + hb - 5, 1), _SCALES - 1) if tot else 0
    return scale * _BANDS + band


def decode_coefficients(data: np.ndarray, start: np.ndarray, end: np.ndarray,
                        lane_of_row: np.ndarray, count: np.ndarray, n: int,
                        trellis: np.ndarray | None = None, mean: bool = False
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Decode the coded coefficients of subframes (rows) in lanes ``data[start:end]``.

    Rows of one lane are decoded in row order; row i, in lane
    ``lane_of_row[i]``, has ``count[i]`` coefficients.  The inverse of
    :func:`coefficient_ops` + :func:`encode_lanes`.  Returns ``(q, bad, reads)``:
    per lane, whether its state became impossible and the bytes it read
    after its first four.  ``trellis``: layout 4, per row, and ``mean`` (see
    :func:`coefficient_ops`).
    """
    ns = count.size
    lanes_n = start.size
    q = np.zeros((ns, n), dtype=np.int64)
    per_lane = np.bincount(lane_of_row, weights=count, minlength=lanes_n).astype(np.int64)
    # Lanes sorted longest first, so the lanes still decoding are a prefix (slices, no gathers).
    order = np.argsort(-per_lane, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(lanes_n)
    dec = RangeDecoder(data, start[order], end[order])
    if ns == 0 or lanes_n == 0:
        return q, dec.bad[rank], dec.reads[rank]
    srow = np.argsort(rank[lane_of_row], kind="stable")  # rows in sorted-lane order
    cnt_s = count[srow]
    tot = int(cnt_s.sum())
    sym_row = np.repeat(srow, cnt_s)
    sym_j = np.arange(tot) - np.repeat(np.cumsum(cnt_s) - cnt_s, cnt_s)
    nsorted = per_lane[order]
    lstart = np.cumsum(nsorted) - nsorted
    st = _DecodeState(sym_j, None if trellis is None else trellis[sym_row], n, lanes_n, mean)
    active = lanes_n
    for k in range(int(nsorted[0])):
        while active and nsorted[active - 1] <= k:
            active -= 1
        if active <= SCALAR_LANES:
            # Few lanes left (a frame decoded alone, or the longest lanes of a batch): one
            # lane at a time in plain integers, far cheaper than a vector step per symbol.
            q[sym_row, sym_j] = st.out
            newest = [(k - 1 - i) % CONTEXT_WINDOW for i in range(CONTEXT_WINDOW)]
            _finish_scalar(dec, active, k, nsorted, lstart, sym_row, sym_j, st.hist[newest],
                           st.state, q, n, trellis, mean)
            return q, dec.bad[rank], dec.reads[rank]
        _decode_step(dec, st, active, lstart[:active] + k, k)
    q[sym_row, sym_j] = st.out
    return q, dec.bad[rank], dec.reads[rank]


#: Context sums below this find their scale class in a table (larger ones: computed).
_CTX_LUT = 1 << 12


class _DecodeState:
    """What the vector steps of :func:`decode_coefficients` carry from step to step.

    Per symbol (in lane order): ``info`` = (min(j, 4) * 8 + band class) * _CTX_LUT
    (below 8 * _CTX_LUT for j = 0), the layout-4 flag ``tr`` and the decoded
    value ``out``; per lane the last ``CONTEXT_WINDOW`` magnitudes ``hist`` (a
    ring, step k in row k % 4) and the trellis ``state``.  ``class_lut[info + S]``
    is the class of a coefficient whose context sum is S < _CTX_LUT.
    """

    def __init__(self, sym_j, tr, n, lanes, mean):
        bands = band_class(np.arange(n), n)
        self.info = ((np.minimum(sym_j, CONTEXT_WINDOW) << 3) + bands[sym_j]) * _CTX_LUT
        self.tr = tr
        self.out = np.zeros(sym_j.size, dtype=np.int64)
        self.hist = np.zeros((CONTEXT_WINDOW, lanes), dtype=np.int64)
        self.state = np.zeros(lanes, dtype=np.int64)  # layout 4: trellis state of each lane
        self.first_row = MEAN_LEN_ROW if mean else LEN_ROW
        self.class_lut = _class_lut()
        # per class: how far a magnitude may reach before its s low bits pass 2**53
        self.room = np.maximum(_BIG_BITS - _model().shift, 0)
        self.n = n


@functools.cache
def _scale_lut() -> np.ndarray:
    s = np.arange(_CTX_LUT, dtype=np.int64)
    d = np.arange(CONTEXT_WINDOW + 1)[:, None]
    cls = _classes(np.broadcast_to(s, (d.size, s.size)), (s << 4) // np.maximum(d, 1),
                   np.zeros(1, np.int64))
    return cls.ravel()


@functools.cache
def _class_lut() -> np.ndarray:
    """Class by (magnitudes in the sum, band class, sum): :func:`_scale_lut` plus the band."""
    table = _scale_lut().reshape(CONTEXT_WINDOW + 1, 1, _CTX_LUT)
    return (table + np.arange(_BANDS)[None, :, None]).ravel()


def _step_classes(st: _DecodeState, a: int, idx: np.ndarray, first: np.ndarray,
                  tot: np.ndarray, info: np.ndarray) -> np.ndarray:
    """Model class of each active lane's symbol (as :func:`context_class`, by table)."""
    cls = st.class_lut[info + np.minimum(tot, _CTX_LUT - 1)]
    big = np.flatnonzero(tot >= _CTX_LUT)
    if big.size:
        key = info[big] // _CTX_LUT
        cls[big] = _classes(tot[big], (tot[big] << 4) // (key >> 3), key & 7)
    if st.tr is not None:
        s = st.state[:a]
        s[first] = 0
        cls += np.where(st.tr[idx], TRELLIS_BASE * (1 + (s >> 1)), 0)
    return np.where(first, st.first_row, cls)


def _decode_step(dec: RangeDecoder, st: _DecodeState, a: int, idx: np.ndarray,
                 k: int) -> None:
    """Decode coefficient ``k`` of each of the lanes ``0 .. a - 1`` (their symbols ``idx``)."""
    info = st.info[idx]
    first = info < 8 * _CTX_LUT
    h = st.hist[:, :a]  # a ring: step k writes row k % CONTEXT_WINDOW
    if _any(first):
        h[:, first] = 0
    tot = h.sum(axis=0)
    cls = _step_classes(st, a, idx, first, tot, info)
    s = _model().shift[cls]
    mag = dec.symbol(slice(0, a), cls)
    lng = mag == MODEL_SYMBOLS  # an escape, or (below) coefficient 0's bit length
    lng &= ~first
    lng |= first
    if _any(lng):
        _long_magnitudes(dec, mag, first, lng)
    # A magnitude of 2**53 or more is no code of ours (the encoder keeps codes below
    # 2**52): the lane is corrupt, and the shift below must not wrap.  Same test as
    # bit_length(mag) + s > 53: mag >> max(53 - s, 0) is not 0.
    over = (mag >> st.room[cls]) > 0
    over |= mag < 0
    if _any(s):  # the s low bits (0 bits: the lane is left as it is)
        mag = (mag << s) | dec.prefix_bits(a, s)
    if _any(over):
        ov = np.flatnonzero(over)
        dec.bad[ov] = True
        mag[ov] = 0
    neg = dec.sign_bits(a, (mag > 0).view(np.int8))  # the sign of each non-zero
    st.out[idx] = np.where(neg, -mag, mag)
    if st.tr is not None:
        s_ = st.state[:a]
        s_[:] = TRANSITIONS[s_, mag & 1]
    h[k % CONTEXT_WINDOW] = mag


def _long_magnitudes(dec: RangeDecoder, mag: np.ndarray, first: np.ndarray,
                     lng: np.ndarray) -> None:
    """Magnitudes of coefficient 0 (from its bit length) and of escapes, in place in ``mag``.

    After the bit length ``eb`` (coefficient 0: the symbol just read; an escape:
    a symbol of the uniform table) come the ``eb - 1`` bits below the leading one.
    """
    li = np.flatnonzero(lng)
    fl = first[li]
    eb = mag[li]
    if not fl.all():
        ei = np.flatnonzero(~fl)
        eb[ei] = dec.symbol(li[ei], np.full(ei.size, LEN_ROW))
    w = np.maximum(eb - 1, 0)
    low = dec.long_bits(li, w) if _any(w) else 0
    e = np.where(eb > 0, (np.int64(1) << w) | low, 0)
    mag[li] = np.where(fl, e, e + MODEL_SYMBOLS)
