"""Dependent (trellis-coded) quantization of a frame's coefficients (frame layout 4).

A scalar quantizer with ideal entropy coding stays about 1/2 log2(pi e / 6) =
0.254 bits per sample above the rate-distortion bound at high rate (the 1.53
dB space-filling loss).  Trellis-coded quantization (Marcellin & Fischer 1990)
recovers most of it: two scalar quantizers, Q0 with the even multiples of the
step and Q1 with the odd multiples and zero, are switched by a four-state
machine driven by the parity of each level, and the encoder picks the whole
sequence of levels with the Viterbi algorithm.  Every level is still one
integer per coefficient, so the entropy coder and the frame layout are those
of version 3; the decoder only follows the state to know which quantizer
each level belongs to.

The state machine and the two reconstruction rules are the "dependent
quantization" of ITU-T H.266 (Versatile Video Coding): state 0 and 1 use
Q0 (value 2 k step), 2 and 3 use Q1 (value (2 k - sgn k) step), and the next
state is ``TRANSITIONS[state, k & 1]``.  Every frame (subframe) starts in
state 0.  Coefficients after the last non-zero level are zero in either
quantizer, so a subframe still ends at its last non-zero level.

Measured on 2000 x 256 uniform samples spanning 2000 steps (high rate): the
mean squared error is 0.98 dB below that of a scalar quantizer of the same
rate (step 2 step); the bound for any quantizer of one dimension is 1.53 dB.

References
----------
M. W. Marcellin and T. R. Fischer, "Trellis coded quantization of memoryless
and Gauss-Markov sources", IEEE Trans. Commun. 38(1), 1990.
G. D. Forney, "The Viterbi algorithm", Proc. IEEE 61(3), 1973.
ITU-T H.266 (2020), Versatile Video Coding, dependent quantization
(sections on the scaling process for transform coefficients).
"""

from __future__ import annotations

import numpy as np

__all__ = ["TRANSITIONS", "STATES", "quantizer_ids", "dequantize_levels", "trellis_quantize",
           "trim_tail"]

#: Next state by (state, level parity).
TRANSITIONS = np.array([[0, 2], [2, 0], [1, 3], [3, 1]], dtype=np.int64)
STATES = 4
_FIRST = np.array([0, 2, 0, 2])
_SECOND = np.array([1, 3, 1, 3])
_SWAP = np.array([2, 3, 0, 1])
#: Coefficients per Viterbi block: a block's candidates and decisions stay small.
_BLOCK_ELEMENTS = 1 << 19


def quantizer_ids(q: np.ndarray) -> np.ndarray:
    """Quantizer (0 or 1) each level of each row is read with: the state before it, >> 1."""
    ns, n = q.shape
    out = np.zeros((ns, n), dtype=np.int64)
    st = np.zeros(ns, dtype=np.int64)
    par = q & 1
    for j in range(n):  # the state is a running automaton: one step per coefficient index
        out[:, j] = st
        st = TRANSITIONS[st, par[:, j]]
    return out >> 1


def dequantize_levels(q: np.ndarray) -> np.ndarray:
    """Reconstruction of levels in units of the step: 2k under Q0, 2k - sgn k under Q1."""
    qid = quantizer_ids(q)
    return (2 * q - np.sign(q) * qid).astype(np.float64)


def _candidates(m: np.ndarray, err: np.ndarray | None = None):
    """Best level magnitude per quantizer and parity, and its squared error.

    ``m`` is |c| / step (N x frames).  Q0 values are 2k: the neighbours
    floor(m/2) and floor(m/2) + 1 have both parities and each is the nearest
    of its parity.  Q1 values are 0, 1, 3, 5 ... (k -> max(2k - 1, 0)): the
    neighbours k1 = floor((m + 1)/2) and k1 + 1 likewise, except that for m in
    [1, 3) the even level 0 (error m**2) may beat the even level 2.  Errors
    (in step**2) go to ``err[:, i]`` (N x 4 x frames) for i = (Q0 even, Q1
    even, Q0 odd, Q1 odd); the levels come back in the same order (4 x N x
    frames) unless ``err`` is given (the step search needs errors only).
    """
    if err is None:
        err = np.empty((m.shape[0], 4, m.shape[1]))
        want_levels = True
    else:
        want_levels = False
    k = np.floor(m * 0.5)
    odd = k - 2.0 * np.floor(k * 0.5)  # 1.0 where k is odd
    r = m - 2.0 * k
    ea = r * r
    eb = (2.0 - r) ** 2
    d = eb - ea
    # even level: k when k is even, else k + 1; the odd one the other way round
    np.add(ea, odd * d, out=err[:, 0])
    np.subtract(eb, odd * d, out=err[:, 2])
    levels = None
    if want_levels:
        levels = np.empty((4,) + m.shape)
        np.add(k, odd, out=levels[0])
        np.add(k, 1.0 - odd, out=levels[2])
    k = np.floor((m + 1.0) * 0.5)
    odd = k - 2.0 * np.floor(k * 0.5)
    r = m - (2.0 * k - 1.0)
    m2 = m * m
    ea = np.where(k == 0.0, m2, r * r)  # level 0 reconstructs 0, not -1
    eb = (2.0 - r) ** 2
    d = eb - ea
    even = ea + odd * d
    zero = (k == 1.0) & (m2 < even)  # level 0 beats level 2
    np.copyto(err[:, 1], np.where(zero, m2, even))
    np.subtract(eb, odd * d, out=err[:, 3])
    if want_levels:
        np.copyto(levels[1], np.where(zero, 0.0, k + odd))
        np.add(k, 1.0 - odd, out=levels[3])
    return err, levels


def trellis_quantize(c: np.ndarray, step: np.ndarray, error_only: bool = False):
    """Levels of least squared error through the trellis, per row; and that error energy.

    Parameters
    ----------
    c : ndarray
        Coefficients, frames x N.
    step : ndarray
        Quantizer step of each frame.
    error_only : bool
        Return only the error energy (the step search): the Viterbi path cost,
        without tracing the path back.

    Returns
    -------
    q : ndarray of int64
        Levels (frames x N); the decoder reconstructs ``dequantize_levels(q) * step``.
    err : ndarray
        Error energy of each frame, sum of (c - reconstruction)**2.
    """
    nf, n = c.shape
    rows = max(256, _BLOCK_ELEMENTS // max(n, 1))
    if nf > rows:
        parts = [trellis_quantize(c[a : a + rows], step[a : a + rows], error_only)
                 for a in range(0, nf, rows)]
        if error_only:
            return np.concatenate(parts)
        return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])
    st = np.asarray(step, dtype=np.float64)
    # coefficient-major (N x 4 x frames): the loop below reads one contiguous block per step
    m = np.abs(c.T) / st
    if error_only:
        e, lev = _candidates(m, np.empty((n, 4, nf)))
    else:
        e, lev = _candidates(m)
    # Next state 0: (0, even) or (1, odd); 2: (0, odd) or (1, even) -- both quantizer Q0;
    # next state 1: (2, even) or (3, odd); 3: (2, odd) or (3, even) -- both quantizer Q1.
    # With e[j] = (Q0 even, Q1 even, Q0 odd, Q1 odd), next state s's first branch comes
    # from state FIRST[s] with error e[j, s], its second from SECOND[s] with e[j, SWAP[s]].
    cost = np.full((STATES, nf), np.inf)
    cost[0] = 0.0
    back = None if error_only else np.zeros((n, STATES, nf), dtype=bool)
    for j in range(n):
        ej = e[j]
        u = cost[_FIRST]
        u += ej
        v = cost[_SECOND]
        v += ej[_SWAP]
        if back is not None:
            np.less(v, u, out=back[j])  # whether each state's second branch won
        cost = np.minimum(u, v, out=u)
    if error_only:
        return cost.min(axis=0) * (st * st)
    lev = lev.astype(np.int64)
    cols = np.arange(nf)
    s = np.argmin(cost, axis=0)
    mag = np.zeros((n, nf), dtype=np.int64)
    # predecessor of state s by whether the second branch won, and the level used
    pred = np.array([[0, 1], [2, 3], [0, 1], [2, 3]])
    which = np.stack([np.arange(STATES), _SWAP], axis=1)
    for j in range(n - 1, -1, -1):
        take = back[j, s, cols].astype(np.int64)
        mag[j] = lev[which[s, take], j, cols]
        s = pred[s, take]
    mag = mag.T
    q = np.where(c < 0, -mag, mag)
    r = c - dequantize_levels(q) * st[:, None]
    return q, np.einsum("ij,ij->i", r, r)


def trim_tail(c: np.ndarray, q: np.ndarray, step: np.ndarray, err: np.ndarray,
              limit: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Zero each row's last levels while its error stays within ``limit``.

    The step search moves in eighth-octave steps, so a frame usually ends
    below its budget.  A scalar frame spends the rest on its cheapest +-1
    codes; a trellis frame cannot change a level freely (its parity steers
    every later level) but can drop its tail: levels after the last non-zero
    one are zero under either quantizer, so zeroing the last levels leaves
    the rest of the path as it was.  The longest tail whose summed error
    increase fits is dropped (fewer coded coefficients, a shorter count).
    Returns the new levels and error energies.
    """
    x = dequantize_levels(q) * np.asarray(step, dtype=np.float64)[:, None]
    added = np.where(q != 0, c * c - (c - x) ** 2, 0.0)
    tail = np.cumsum(added[:, ::-1], axis=1)[:, ::-1]  # error added by zeroing j .. N-1
    fits = tail <= (limit - err)[:, None]
    n = q.shape[1]
    first = np.where(fits.any(axis=1), np.argmax(fits, axis=1), n)
    keep = np.arange(n) < first[:, None]
    r = c - np.where(keep, x, 0.0)  # the kept levels reconstruct as before
    return np.where(keep, q, 0), np.einsum("ij,ij->i", r, r)
