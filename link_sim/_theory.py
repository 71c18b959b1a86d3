"""Closed-form bit error rates for coherent detection over AWGN.

References
----------
J. G. Proakis and M. Salehi, *Digital Communications*, 5th ed., McGraw-Hill,
2008, sec. 4.2-4.3: BPSK P_b = Q(sqrt(2 Eb/N0)); Gray-coded QPSK has the same
P_b per bit because its I and Q rails are two independent BPSK rails.
B. Sklar, *Digital Communications*, 2nd ed., Prentice Hall, 2001, sec. 4.7.
"""

from __future__ import annotations

import numpy as np
from scipy.special import erfc, erfcinv
from scipy.stats import binom

__all__ = ["qfunc", "qfunc_inv", "db_to_linear", "linear_to_db", "ber_bpsk", "ber_qpsk_gray",
           "ber_theory", "ebn0_for_ber_bpsk", "ber_rs_bounded_distance"]


def qfunc(x):
    """Gaussian tail probability Q(x) = P(Z > x) for Z ~ N(0, 1).

    Parameters
    ----------
    x : array_like
        Thresholds.

    Returns
    -------
    ndarray
        Q(x), computed as erfc(x / sqrt 2) / 2.

    Examples
    --------
    Q(0) = 1/2, Q(1) = 0.158655, Q(3) = 0.0013499 (Abramowitz & Stegun,
    table 26.1, via 1 - P(x)):

    >>> qfunc([0.0, 1.0, 3.0]).round(7).tolist()
    [0.5, 0.1586553, 0.0013499]
    """
    return 0.5 * erfc(np.asarray(x, dtype=np.float64) / np.sqrt(2.0))


def qfunc_inv(p):
    """Inverse of :func:`qfunc`."""
    return np.sqrt(2.0) * erfcinv(2.0 * np.asarray(p, dtype=np.float64))


def db_to_linear(db):
    """10**(dB/10)."""
    return 10.0 ** (np.asarray(db, dtype=np.float64) / 10.0)


def linear_to_db(x):
    """10 log10(x).

    Parameters
    ----------
    x : array_like
        Power ratios.

    Returns
    -------
    ndarray
        The ratios in decibels.

    Examples
    --------
    >>> linear_to_db([2.0, 100.0]).round(4).tolist()
    [3.0103, 20.0]
    """
    return 10.0 * np.log10(np.asarray(x, dtype=np.float64))


def ber_bpsk(ebn0_db):
    """Bit error rate of coherent BPSK at ``ebn0_db``: Q(sqrt(2 Eb/N0)) (Proakis 4.3).

    Parameters
    ----------
    ebn0_db : array_like
        Energy per bit over noise density, dB.

    Returns
    -------
    ndarray
        Bit error probability.

    Examples
    --------
    The textbook figure: about 9.6 dB for a BER of 1e-5 (Sklar, sec. 4.7):

    >>> f"{float(ber_bpsk(9.6)):.2e}"
    '9.74e-06'
    """
    return qfunc(np.sqrt(2.0 * db_to_linear(ebn0_db)))


def ber_qpsk_gray(ebn0_db):
    """Bit error rate of coherent Gray-coded QPSK: equal to BPSK at equal Eb/N0 (Proakis 4.3).

    Parameters
    ----------
    ebn0_db : array_like
        Energy per bit over noise density, dB.

    Returns
    -------
    ndarray
        Bit error probability.

    Examples
    --------
    >>> bool(ber_qpsk_gray(6.0) == ber_bpsk(6.0))
    True
    """
    return ber_bpsk(ebn0_db)


def ber_theory(modulation: str, ebn0_db):
    """Closed-form channel BER of ``modulation`` (``bpsk`` or ``qpsk``).

    Parameters
    ----------
    modulation : {"bpsk", "qpsk"}
        The modulation (QPSK Gray-coded).
    ebn0_db : array_like
        Energy per bit over noise density, dB.

    Returns
    -------
    ndarray
        Bit error probability.

    Raises
    ------
    ValueError
        For a modulation without a closed form here.

    Examples
    --------
    >>> ber_theory("qpsk", [0.0, 9.6]).round(8).tolist()
    [0.0786496, 9.74e-06]
    """
    if modulation not in ("bpsk", "qpsk"):
        raise ValueError(f"no closed form for modulation {modulation!r}")
    return ber_bpsk(ebn0_db)


def ebn0_for_ber_bpsk(ber):
    """Eb/N0 in dB at which uncoded BPSK reaches ``ber`` (inverse of :func:`ber_bpsk`).

    Parameters
    ----------
    ber : array_like
        Target bit error rates in (0, 0.5).

    Returns
    -------
    ndarray
        Eb/N0 in dB.

    Examples
    --------
    About 9.6 dB for 1e-5 (Sklar, sec. 4.7):

    >>> round(float(ebn0_for_ber_bpsk(1e-5)), 2)
    9.59
    """
    return linear_to_db(qfunc_inv(ber) ** 2 / 2.0)


def ber_rs_bounded_distance(p_bit, n: int = 255, k: int = 223, m: int = 8,
                            wrong_symbol: str = "binary"):
    """Decoded bit error rate of a t-error-correcting RS(n, k) code over GF(2^m).

    Independent channel bit errors at rate ``p_bit`` give symbol errors at
    p_s = 1 - (1 - p_bit)^m; a bounded-distance decoder leaves j > t symbol
    errors in place, so P_s,out ~ (1/n) sum_{j>t} j C(n,j) p_s^j (1-p_s)^(n-j)
    (Sklar, *Digital Communications*, 2nd ed., sec. 8.1, written from memory).
    Bits per wrong symbol: ``"uniform"`` uses Sklar's 2^(m-1)/(2^m-1) of m
    (a uniformly random wrong symbol); ``"binary"`` (default) uses the mean
    number of bit errors in a symbol known to be wrong, m p_bit / p_s, which is
    what a failed decoder hands on when it leaves the received symbols as they are.

    Parameters
    ----------
    p_bit : float or array_like
        Channel bit error rate.
    n, k, m : int
        Code length and dimension in symbols, and bits per symbol.
    wrong_symbol : {"binary", "uniform"}
        How many bits a wrong decoded symbol holds in error (see above).

    Returns
    -------
    float or ndarray
        Decoded bit error rate (a float for a scalar ``p_bit``).

    Examples
    --------
    RS(255,223) corrects 16 symbol errors: at a channel BER of 1e-3 (about 2
    wrong symbols per word) the decoded BER is negligible; at 1e-2 (about 20
    per word) the code fails often and barely helps:

    >>> ber_rs_bounded_distance(1e-3) < 1e-12, 1e-3 < ber_rs_bounded_distance(1e-2) < 1e-2
    (True, True)
    >>> ber_rs_bounded_distance(0.0)
    0.0
    """
    t = (n - k) // 2
    p = np.atleast_1d(np.asarray(p_bit, dtype=np.float64))
    ps = 1.0 - (1.0 - p) ** m
    j = np.arange(t + 1, n + 1)
    ps_out = (j[None, :] * binom.pmf(j[None, :], n, ps[:, None])).sum(axis=1) / n
    if wrong_symbol == "uniform":
        out = ps_out * 2 ** (m - 1) / (2**m - 1)
    else:
        out = ps_out * np.divide(p, ps, out=np.zeros_like(p), where=ps > 0)
    return out if np.ndim(p_bit) else float(out[0])
