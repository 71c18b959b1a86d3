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
previous min(j, 4) magnitudes of the same subframe (:func:`context_class`); the
class fixes a shift ``s`` and a geometric law of ratio ``a / 2**16``.  The
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

import numpy as np

__all__ = [
    "TOTAL_BITS",
    "MODEL_SYMBOLS",
    "CONTEXT_WINDOW",
    "geometric_cum",
    "context_class",
    "CUM",
    "SHIFT",
    "LEN_ROW",
    "encode_lanes",
    "RangeDecoder",
    "coefficient_ops",
    "coefficient_cost_bits",
    "decode_coefficients",
]

TOTAL_BITS = 15
TOTAL = 1 << TOTAL_BITS
#: Model symbols 0 .. M-1 of the high part; symbol M is the escape.
MODEL_SYMBOLS = 64
#: Coefficients whose magnitudes form the context of the next one.
CONTEXT_WINDOW = 4
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


# Context classes: 0 for S = 0 (split by band, see context_class), then half-octave
# classes of u = 16 S / count (16 x the mean magnitude of the context).
_BAND_CLASSES = 6
_HALF_OCTAVES = 120


#: (shift s, z, a) of each class, measured on the quantized DCT coefficients of
#: Gaussian AR(1) sources (rho 0.9, 0.95, 0.99; F 0.95, 0.99, 0.999; N = 256;
#: seed 99, not the benchmark's): the high part |q| >> s has P(0) = z / 2**16
#: and, from 1 on, a geometric tail of ratio a / 2**16.  Classes 0-5: S = 0 at
#: j = 1, 2-3, 4-7, 8-15, 16-31, >= 32; then half-octaves of 16 S / count.
_MEASURED = (
    (0, 41286, 6796), (0, 41286, 6796), (0, 41286, 6796), (0, 41286, 6796),
    (0, 44711, 7470), (0, 54304, 3966), (0, 44435, 9045), (0, 44435, 9045),
    (0, 36343, 14291), (0, 29263, 20604), (0, 21267, 29246), (0, 15223, 35292),
    (0, 11381, 41170), (0, 8476, 46772), (0, 6291, 51683), (0, 4325, 55375),
    (1, 8910, 51266), (1, 6921, 54950), (1, 4782, 57598), (2, 7738, 54380),
    (2, 6403, 56167), (2, 5369, 57148), (3, 9860, 50883), (3, 7068, 53899),
)


def _class_params(c: int) -> tuple[int, int, int]:
    """(s, z, a) of class c; beyond the measured ones each half-octave pair doubles the scale."""
    if c < len(_MEASURED):
        return _MEASURED[c]
    base = len(_MEASURED) - 2
    s, z, a = _MEASURED[base + (c - base) % 2]
    return s + (c - base) // 2, z, a


def _build_tables():
    rows, shifts = [], []
    for c in range(_BAND_CLASSES + _HALF_OCTAVES):
        s, z, a = _class_params(c)
        rows.append(geometric_cum(a, z))
        shifts.append(s)
    rows.append(_uniform_cum())
    shifts.append(0)
    return np.array(rows, dtype=np.int64), np.array(shifts, dtype=np.int64)


#: Cumulative tables, one row per class (last row: the uniform bit-length table).
CUM, SHIFT = _build_tables()
LEN_ROW = CUM.shape[0] - 1
_W = CUM.shape[1]
_FLAT = CUM.ravel()
# cost in bits of each (class, symbol): -log2(freq / TOTAL)
with np.errstate(divide="ignore"):
    _COST = TOTAL_BITS - np.log2(np.diff(CUM, axis=1).astype(np.float64))


def _bit_length(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x, dtype=np.int64)
    out = np.frexp(x.astype(np.float64))[1].astype(np.int64)
    big = x >= (1 << 52)
    if big.any():
        out[big] = [int(v).bit_length() for v in x[big]]
    return out


def context_class(total: np.ndarray, count: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Model class of coefficient j >= 1 from the sum of the previous ``count`` magnitudes."""
    total = np.asarray(total, dtype=np.int64)
    return _classes(total, (total << 4) // np.maximum(count, 1), _band(j))


def _band(j: np.ndarray) -> np.ndarray:
    return np.minimum(_bit_length(j) - 1, _BAND_CLASSES - 1)


def _classes(total: np.ndarray, u: np.ndarray, band: np.ndarray) -> np.ndarray:
    bl = np.frexp(u.astype(np.float64))[1]  # exact bit length below 2**53
    bl = bl.astype(np.int64)
    h = (u >> np.maximum(bl - 2, 0)) & 1
    c = np.clip(2 * bl + h + (_BAND_CLASSES - 6), _BAND_CLASSES,
                _BAND_CLASSES + _HALF_OCTAVES - 1)
    return np.where(total == 0, band, c)


def _contexts(mag: np.ndarray) -> np.ndarray:
    """Class of every coefficient of every row (column 0: -1, coded on its own)."""
    ns, n = mag.shape
    c = np.zeros((ns, n + 1), dtype=np.int64)
    np.cumsum(mag, axis=1, out=c[:, 1:])
    j = np.arange(1, n)
    lo = np.maximum(j - CONTEXT_WINDOW, 0)
    total = c[:, j] - c[:, lo]
    u = total << 2  # 16 S / 4 once four magnitudes are known
    w = min(CONTEXT_WINDOW, n) - 1
    u[:, :w] = (total[:, :w] << 4) // j[:w]
    cls = np.full((ns, n), -1, dtype=np.int64)
    cls[:, 1:] = _classes(total, u, _band(j))
    return cls


def coefficient_ops(q: np.ndarray, count: np.ndarray):
    """Coding operations of the coded coefficients (j < count) of each row of ``q``.

    Returns ``(cum, freq, shift, row)`` flat in row-major order (rows in order,
    coefficients in order), ``row`` giving each operation's row.  Per
    coefficient: the model symbol; on escape (or for coefficient 0) the bit
    length symbol and the bits below the leading one; the ``s`` low bits; the
    sign of a non-zero.  Rare operations are built only where present.
    """
    ns, n = q.shape
    mag2 = np.abs(q).astype(np.int64)
    cls2 = _contexts(mag2)
    flat = np.flatnonzero((np.arange(n) < count[:, None]).ravel())
    row = flat // n
    first = (flat % n) == 0
    mag = mag2.ravel()[flat]
    cls = cls2.ravel()[flat]
    neg = q.ravel()[flat] < 0
    s = np.where(first, 0, SHIFT[np.maximum(cls, 0)])
    hi = mag >> s
    esc = ~first & (hi >= MODEL_SYMBOLS)
    big = first | esc
    sym = np.where(first, _bit_length(mag), np.minimum(hi, MODEL_SYMBOLS))
    tab = np.where(first, LEN_ROW, cls) * _W + sym
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
    cum = np.empty(total, np.int64)
    freq = np.ones(total, np.int64)
    shift = np.empty(total, np.int64)
    cum[base] = _FLAT[tab]
    freq[base] = _FLAT[tab + 1] - _FLAT[tab]
    shift[base] = TOTAL_BITS
    at = base + 1
    # escape: bit length of hi - M from the uniform table
    ei = np.flatnonzero(esc)
    if ei.size:
        fe = LEN_ROW * _W + eb[np.searchsorted(bi, ei)]
        cum[at[ei]] = _FLAT[fe]
        freq[at[ei]] = _FLAT[fe + 1] - _FLAT[fe]
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


def coefficient_cost_bits(q: np.ndarray, count: np.ndarray | None = None) -> np.ndarray:
    """Ideal code length in bits, -sum log2 p, of each row's coded coefficients.

    Used by the encoder's rate choice; the range coder spends this plus at most
    a few bits per lane.  ``count`` defaults to last non-zero + 1.
    """
    ns, n = q.shape
    mag = np.abs(q).astype(np.int64)
    if count is None:
        nzr = mag > 0
        count = np.where(nzr.any(axis=1), n - np.argmax(nzr[:, ::-1], axis=1), 0)
    cls = _contexts(mag)
    coded = np.arange(n) < count[:, None]
    s = SHIFT[np.maximum(cls, 0)]
    s[:, 0] = 0
    hi = mag >> s
    esc = hi >= MODEL_SYMBOLS
    esc[:, 0] = False
    sym = np.minimum(hi, MODEL_SYMBOLS)
    bl0 = _bit_length(mag[:, 0])
    sym[:, 0] = bl0
    row_cls = cls.copy()
    row_cls[:, 0] = LEN_ROW
    bits = _COST[row_cls, sym] + s + (mag > 0)
    eb = _bit_length(np.where(esc, hi - MODEL_SYMBOLS, 0))
    bits += np.where(esc, _COST[LEN_ROW, 0] + np.maximum(eb - 1, 0), 0)
    bits[:, 0] += np.maximum(bl0 - 1, 0)
    return np.where(coded, bits, 0.0).sum(axis=1)


def encode_lanes(cum: np.ndarray, freq: np.ndarray, shift: np.ndarray, lane: np.ndarray,
                 lanes: int) -> tuple[np.ndarray, np.ndarray]:
    """Range-code the operations of every lane; return (bytes of all lanes, bytes per lane).

    ``lane`` gives each operation's lane, non-decreasing; operations of a lane
    are coded in order.  The lanes' bytes come back concatenated in lane order.
    """
    nops = np.bincount(lane, minlength=lanes).astype(np.int64)
    ostart = np.cumsum(nops) - nops
    order = np.argsort(-nops, kind="stable")  # longest lanes first: active lanes are a prefix
    nsorted = nops[order]
    # bytes a lane can emit: each op narrows range by at most shift + 1 bits
    bits = np.bincount(lane, weights=shift + 1, minlength=lanes).astype(np.int64)
    cap = bits // 8 + 3
    bstart = np.cumsum(cap) - cap
    buf = np.zeros(int(cap.sum()) + 1, dtype=np.uint8)
    low = np.zeros(lanes, dtype=np.int64)
    rng = np.full(lanes, _MASK32, dtype=np.int64)
    pos = bstart[order].copy()  # write position (absolute), per sorted lane
    base = bstart[order]
    low = low[order]
    rng = rng[order]
    os_ = ostart[order]
    steps = int(nsorted[0]) if lanes else 0
    active = lanes
    for k in range(steps):
        while active and nsorted[active - 1] <= k:
            active -= 1
        a = slice(0, active)
        idx = os_[a] + k
        r = rng[a] >> shift[idx]
        lw = low[a] + r * cum[idx]
        rng[a] = r * freq[idx]
        carry = lw > _MASK32
        if carry.any():
            lw[carry] -= 1 << 32
            _propagate(buf, pos[a][carry] - 1)
        low[a] = lw
        _renorm_encode(buf, low, rng, pos, active)
    # flush: round low up to a multiple of 2**24 and write its top byte
    v = (low + _TOP - 1) & ~np.int64(_TOP - 1)
    carry = v > _MASK32
    if carry.any():
        v[carry] -= 1 << 32
        _propagate(buf, pos[carry] - 1)
    buf[pos] = (v >> 24).astype(np.uint8)
    pos = pos + 1
    # drop trailing zero bytes of each lane (the decoder reads zeros past the end)
    length = np.zeros(lanes, dtype=np.int64)
    used = pos - base
    length[order] = _trim_zeros(buf, base, used)
    keep = np.repeat(bstart, length) + (np.arange(int(length.sum())) -
                                        np.repeat(np.cumsum(length) - length, length))
    return buf[keep], length


def _trim_zeros(buf: np.ndarray, base: np.ndarray, used: np.ndarray) -> np.ndarray:
    """Length of each lane's bytes ``buf[base : base + used]`` without trailing zeros."""
    total = int(used.sum())
    if total == 0:
        return used
    owner = np.repeat(np.arange(base.size), used)
    off = np.arange(total) - np.repeat(np.cumsum(used) - used, used)
    vals = buf[np.repeat(base, used) + off]
    last = np.full(base.size, -1, dtype=np.int64)
    nzi = np.flatnonzero(vals)
    np.maximum.at(last, owner[nzi], off[nzi])
    return last + 1


def _propagate(buf: np.ndarray, at: np.ndarray) -> None:
    """Add one to the byte at each position, carrying into earlier bytes on overflow."""
    at = at.copy()
    while at.size:
        buf[at] += np.uint8(1)  # positions are distinct (one per lane)
        wrapped = buf[at] == 0
        at = at[wrapped] - 1


def _renorm_encode(buf, low, rng, pos, active) -> None:
    for _ in range(3):
        need = np.flatnonzero(rng[:active] < _TOP)
        if not need.size:
            return
        buf[pos[need]] = (low[need] >> 24).astype(np.uint8)
        pos[need] += 1
        low[need] = (low[need] << 8) & _MASK32
        rng[need] <<= 8


# Symbol of every (class, value t >> _LUT_DROP): most t decode with one lookup.
_LUT_DROP = 3


def _build_lut():
    width = TOTAL >> _LUT_DROP
    t = np.arange(width, dtype=np.int64) << _LUT_DROP
    lo = np.empty((CUM.shape[0], width), dtype=np.int64)
    hi = np.empty_like(lo)
    for c in range(CUM.shape[0]):
        lo[c] = np.searchsorted(CUM[c], t, side="right") - 1
        hi[c] = np.searchsorted(CUM[c], t + (1 << _LUT_DROP) - 1, side="right") - 1
    return lo.astype(np.int8).ravel(), (lo == hi).ravel()


_LUT, _LUT_EXACT = _build_lut()


class RangeDecoder:
    """Decoder state for many lanes at once; lane i reads ``data[start[i] : end[i]]``.

    Bytes past a lane's end read as zero.  ``bad`` marks lanes whose state
    became impossible (a corrupt lane that still passed its CRC); ``reads``
    counts the bytes each lane took after its first four.  ``lanes``
    arguments are index arrays or slices into the lane arrays.
    """

    def __init__(self, data: np.ndarray, start: np.ndarray, end: np.ndarray):
        self.data = np.concatenate([np.asarray(data, dtype=np.uint8), np.zeros(1, np.uint8)])
        self.pos = start.astype(np.int64).copy()
        self.end = end.astype(np.int64)
        self.rng = np.full(start.size, _MASK32, dtype=np.int64)
        self.value = np.zeros(start.size, dtype=np.int64)
        self.bad = np.zeros(start.size, dtype=bool)
        self.reads = np.zeros(start.size, dtype=np.int64)
        lanes = np.arange(start.size)
        for _ in range(4):
            self.value = (self.value << 8) | self._next(lanes)
        self.reads[:] = 0

    def _next(self, lanes) -> np.ndarray:
        p = self.pos[lanes]
        ok = p < self.end[lanes]
        b = self.data[np.where(ok, p, self.data.size - 1)].astype(np.int64)
        self.pos[lanes] = p + 1
        self.reads[lanes] += 1
        return b

    def _renorm(self, lanes) -> None:
        for _ in range(3):
            need = self.rng[lanes] < _TOP
            if not need.any():
                return
            if isinstance(lanes, slice):
                need = np.flatnonzero(need) + (lanes.start or 0)
            else:
                need = lanes[need]
            self.value[need] = ((self.value[need] << 8) | self._next(need))
            self.rng[need] <<= 8

    def symbol(self, lanes, row: np.ndarray) -> np.ndarray:
        """Decode one model symbol per lane with cumulative table row ``row``."""
        r = self.rng[lanes] >> TOTAL_BITS
        val = self.value[lanes]
        t = np.minimum(val // r, TOTAL - 1)
        li = row * (TOTAL >> _LUT_DROP) + (t >> _LUT_DROP)
        s = _LUT[li].astype(np.int64)
        base = row * _W
        slow = ~_LUT_EXACT[li]
        if slow.any():  # t falls where a table step sits inside the lookup cell
            k = np.flatnonzero(slow)
            while True:
                more = (s[k] < _W - 2) & (_FLAT[base[k] + s[k] + 1] <= t[k])
                if not more.any():
                    break
                s[k] += more
        c0 = _FLAT[base + s]
        self._narrow(lanes, r, val - r * c0, r * (_FLAT[base + s + 1] - c0))
        return s

    def bits(self, lanes, width) -> np.ndarray:
        """Decode a ``width``-bit bypass value per lane (0 <= width <= 16)."""
        r = self.rng[lanes] >> width
        val = self.value[lanes]
        v = np.minimum(val // r, (np.int64(1) << width) - 1)
        self._narrow(lanes, r, val - r * v, r)
        return v

    def long_bits(self, lanes: np.ndarray, width: np.ndarray) -> np.ndarray:
        """A bypass value of up to 64 bits, as chunks of <= 16 bits, most significant first."""
        out = np.zeros(lanes.size, dtype=np.int64)
        rem = np.asarray(width, dtype=np.int64).copy()
        while (rem > 0).any():
            cw = np.minimum(rem, _BYPASS_MAX)
            rem = rem - cw
            sel = cw > 0
            v = self.bits(lanes[sel], cw[sel])
            out[sel] = (out[sel] << cw[sel]) | v
        return out

    def _narrow(self, lanes, r, val, rng) -> None:
        bad = val >= rng
        if bad.any():
            self.bad[np.arange(self.bad.size)[lanes][bad]] = True
            val = np.minimum(val, rng - 1)
        self.value[lanes] = val
        self.rng[lanes] = rng
        self._renorm(lanes)


def decode_coefficients(data: np.ndarray, start: np.ndarray, end: np.ndarray,
                        lane_of_row: np.ndarray, count: np.ndarray, n: int
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Decode the coded coefficients of subframes (rows) in lanes ``data[start:end]``.

    Rows of one lane are decoded in row order; row i, in lane
    ``lane_of_row[i]``, has ``count[i]`` coefficients.  The inverse of
    :func:`coefficient_ops` + :func:`encode_lanes`.  Returns ``(q, bad, reads)``:
    per lane, whether its state became impossible and the bytes it read
    after its first four.
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
    hist = np.zeros((CONTEXT_WINDOW, lanes_n), dtype=np.int64)
    active = lanes_n
    for k in range(int(nsorted[0])):
        while active and nsorted[active - 1] <= k:
            active -= 1
        lanes = slice(0, active)
        idx = lstart[:active] + k
        row = sym_row[idx]
        j = sym_j[idx]
        first = j == 0
        h = hist[:, :active]
        h[:, first] = 0
        tot_ctx = h.sum(axis=0)
        cls = context_class(tot_ctx, np.minimum(j, CONTEXT_WINDOW), j)
        cls[first] = LEN_ROW
        s = SHIFT[cls]
        s[first] = 0
        sym = dec.symbol(lanes, cls)
        esc = ~first & (sym == MODEL_SYMBOLS)
        mag = sym
        lng = first | esc
        if lng.any():
            li = np.flatnonzero(lng)
            eb = np.where(first[li], sym[li], 0)
            ei = np.flatnonzero(esc[li])
            if ei.size:
                eb[ei] = dec.symbol(li[ei], np.full(ei.size, LEN_ROW))
            low = dec.long_bits(li, np.maximum(eb - 1, 0))
            e = np.where(eb > 0, (np.int64(1) << np.maximum(eb - 1, 0)) | low, 0)
            mag[li] = np.where(first[li], e, e + MODEL_SYMBOLS)
        si = np.flatnonzero(s)
        if si.size:  # the s low bits
            mag[si] = (mag[si] << s[si]) | dec.long_bits(si, s[si])
        zi = np.flatnonzero(mag)
        val = mag
        if zi.size:  # sign of each non-zero
            neg = dec.bits(zi, 1) == 1
            val = mag.copy()
            val[zi[neg]] = -mag[zi[neg]]
        q[row, j] = val
        h[1:] = h[:-1].copy()
        h[0] = mag
    return q, dec.bad[rank], dec.reads[rank]
