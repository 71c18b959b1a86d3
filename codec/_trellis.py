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

__all__ = ["TRANSITIONS", "STATES", "quantizer_ids", "dequantize_levels", "trellis_quantize"]

#: Next state by (state, level parity).
TRANSITIONS = np.array([[0, 2], [2, 0], [1, 3], [3, 1]], dtype=np.int64)
STATES = 4
_FIRST = np.array([0, 2, 0, 2])
_SECOND = np.array([1, 3, 1, 3])
#: Frames per Viterbi block: the per-coefficient decisions of a block stay small.
_BLOCK_ROWS = 2048


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


def _parity_split(k, ek, k_next, e_next):
    """(even level, its error), (odd level, its error) from two adjacent levels."""
    odd = (k - 2.0 * np.floor(k * 0.5)) > 0
    return ((np.where(odd, k_next, k), np.where(odd, e_next, ek)),
            (np.where(odd, k, k_next), np.where(odd, ek, e_next)))


def _candidates(m: np.ndarray):
    """Best level magnitude and its squared error, per quantizer and parity.

    ``m`` is |c| / step.  Q0 values are 2k: the neighbours floor(m/2) and
    floor(m/2) + 1 have both parities and each is the nearest of its parity.
    Q1 values are 0, 1, 3, 5 ... (k -> max(2k - 1, 0)): the neighbours k1 =
    floor((m + 1)/2) and k1 + 1 likewise, except that for m in [1, 3) the
    even level 0 (error m**2) may beat the even level 2.  Returns
    ``(q0, q1)``, each ``(even, odd)`` of (level magnitude, error in step**2).
    """
    k0 = np.floor(m * 0.5)
    r = m - 2.0 * k0
    q0 = _parity_split(k0, r * r, k0 + 1.0, (2.0 - r) ** 2)
    k1 = np.floor((m + 1.0) * 0.5)
    r = m - (2.0 * k1 - 1.0)
    m2 = m * m
    ea = np.where(k1 == 0.0, m2, r * r)  # level 0 reconstructs 0, not -1
    (ke, ee), odd = _parity_split(k1, ea, k1 + 1.0, (2.0 - r) ** 2)
    zero = (k1 == 1.0) & (m2 < ee)
    return q0, ((np.where(zero, 0.0, ke), np.where(zero, m2, ee)), odd)


def trellis_quantize(c: np.ndarray, step: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Levels of least squared error through the trellis, per row; and that error energy.

    Parameters
    ----------
    c : ndarray
        Coefficients, frames x N.
    step : ndarray
        Quantizer step of each frame.

    Returns
    -------
    q : ndarray of int64
        Levels (frames x N); the decoder reconstructs ``dequantize_levels(q) * step``.
    err : ndarray
        Error energy of each frame, sum of (c - reconstruction)**2.
    """
    nf, n = c.shape
    if nf > _BLOCK_ROWS:
        parts = [trellis_quantize(c[a : a + _BLOCK_ROWS], step[a : a + _BLOCK_ROWS])
                 for a in range(0, nf, _BLOCK_ROWS)]
        return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])
    st = np.asarray(step, dtype=np.float64)[:, None]
    q0, q1 = _candidates(np.abs(c) / st)  # every coefficient at once; the loop only selects
    lev = np.stack([q0[0][0], q0[1][0], q1[0][0], q1[1][0]]).astype(np.int64)
    e00, e01, e10, e11 = q0[0][1], q0[1][1], q1[0][1], q1[1][1]
    # Branches into next state s: the first from state FIRST[s], the second from SECOND[s].
    # Next state 0: (0, even) or (1, odd); 2: (0, odd) or (1, even) -- both quantizer Q0;
    # next state 1: (2, even) or (3, odd); 3: (2, odd) or (3, even) -- both quantizer Q1.
    eu = np.ascontiguousarray(np.stack([e00, e10, e01, e11]).transpose(2, 0, 1))
    ev = np.ascontiguousarray(np.stack([e01, e11, e00, e10]).transpose(2, 0, 1))
    cost = np.full((STATES, nf), np.inf)
    cost[0] = 0.0
    back = np.zeros((n, STATES, nf), dtype=bool)  # whether each state's second branch won
    for j in range(n):
        u = cost[_FIRST] + eu[j]
        v = cost[_SECOND] + ev[j]
        np.less(v, u, out=back[j])
        cost = np.minimum(u, v)
    rows = np.arange(nf)
    s = np.argmin(cost, axis=0)
    mag = np.zeros((nf, n), dtype=np.int64)
    # predecessor of state s by whether the second branch won, and the (quantizer, parity) used
    pred = np.array([[0, 1], [2, 3], [0, 1], [2, 3]])
    par = np.array([[0, 1], [0, 1], [1, 0], [1, 0]])
    for j in range(n - 1, -1, -1):
        take = back[j, s, rows].astype(np.int64)
        qid = s & 1  # next states 0, 2 come from Q0 states; 1, 3 from Q1 states
        mag[:, j] = lev[2 * qid + par[s, take], rows, j]
        s = pred[s, take]
    q = np.where(c < 0, -mag, mag)
    r = c - dequantize_levels(q) * st
    return q, np.einsum("ij,ij->i", r, r)
