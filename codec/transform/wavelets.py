"""Orthonormal Daubechies and symlet bases, periodised to N x N matrices.

A discrete wavelet transform with orthonormal filters and periodic extension
is an orthonormal map of R^N onto itself when N is divisible by 2**depth, so
each wavelet family gives an N x N basis like the DCT.  Rows are ordered as
``pywt.wavedec(x, name, mode="periodization")`` returns the coefficients:
[approximation at the coarsest level, details coarsest ... finest].

Only the filter taps come from PyWavelets (the well-kept source of the
published filters); the periodic filter-and-downsample cascade is written
here on whole matrices, so the tests can hold it against ``pywt.wavedec``,
and with elementwise arithmetic in a fixed order, so every machine builds the
same matrix bit for bit.

Full depth is the deepest level at which the filter still fits in the
coarsest approximation (``pywt.dwt_max_level``): deeper levels would wrap the
filter around the frame more than once.

References
----------
I. Daubechies, "Orthonormal bases of compactly supported wavelets",
Comm. Pure Appl. Math. 41 (1988) 909-996.
S. Mallat, "A theory for multiresolution signal decomposition: the wavelet
representation", IEEE Trans. PAMI 11 (1989) 674-693.
"""

from __future__ import annotations

import functools

import numpy as np
import pywt

from .bases import register_basis

__all__ = ["WAVELET_CODES", "wavelet_matrix", "wavelet_depth", "wavelet_check"]

#: Header codes: db2..db10 are 5..13, sym4..sym8 are 14..18.
WAVELET_CODES: dict[str, int] = {
    **{f"db{k}": 3 + k for k in range(2, 11)},
    **{f"sym{k}": 10 + k for k in range(4, 9)},
}


@functools.lru_cache(maxsize=32)
def _filters(name: str) -> tuple[np.ndarray, np.ndarray]:
    w = pywt.Wavelet(name)
    return np.asarray(w.dec_lo, dtype=np.float64), np.asarray(w.dec_hi, dtype=np.float64)


def wavelet_depth(name: str, n: int) -> int:
    """Full depth for frames of ``n`` samples: the deepest level the filter fits."""
    return pywt.dwt_max_level(n, len(_filters(name)[0]))


def wavelet_check(name: str, n: int, depth: int | None = None) -> str | None:
    """None when ``name`` can make an N x N basis at ``depth`` (default full), else why not."""
    taps = len(_filters(name)[0])
    need = 2 * (taps - 1)
    if n & (n - 1) or n < need:
        smallest = 1 << (need - 1).bit_length()
        return (f"needs a power of two of at least {smallest} (its filter has {taps} taps "
                "and periodisation halves the frame at every level)")
    if depth is not None and not 1 <= depth <= int(np.log2(n)):
        return f"cannot go {depth} levels deep in a frame of {n} samples"
    return None


def _analysis_step(x: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """One periodised filter-and-downsample step on the rows of ``x`` (length m, even).

    a[k] = sum_j lo[j] x[(2k + L/2 - j) mod m] (same for the detail with ``hi``):
    the alignment PyWavelets uses in its ``periodization`` mode.

    The sum runs over the taps in a fixed order with one rounding per product
    and per addition, not through a matrix product, so the basis does not
    depend on the BLAS kernel or the thread count.
    """
    m = x.shape[1]
    half = np.arange(m // 2)
    approx = np.zeros((x.shape[0], m // 2))
    detail = np.zeros((x.shape[0], m // 2))
    for j in range(lo.size):
        column = x[:, (2 * half + lo.size // 2 - j) % m]
        approx += column * lo[j]
        detail += column * hi[j]
    return approx, detail


def wavelet_matrix(name: str, n: int, depth: int | None = None) -> np.ndarray:
    """The N x N analysis matrix of wavelet ``name`` (rows = basis vectors).

    Parameters
    ----------
    name : str
        A PyWavelets orthogonal wavelet name (``db2``..``db10``, ``sym4``..``sym8``).
    n : int
        Frame length, a power of two long enough for the filter.
    depth : int, optional
        Decomposition levels; default full depth (:func:`wavelet_depth`).
    """
    reason = wavelet_check(name, n, depth)
    if reason:
        raise ValueError(f"wavelet {name} at N={n}: it {reason}")
    depth = wavelet_depth(name, n) if depth is None else depth
    lo, hi = _filters(name)
    # Transform the identity: column i of the analysis matrix is the transform of e_i.
    approx = np.eye(n)
    details = []
    for _ in range(depth):
        approx, detail = _analysis_step(approx, lo, hi)
        details.append(detail)
    rows = np.hstack([approx] + details[::-1]).T
    gram = rows @ rows.T
    if not np.allclose(gram, np.eye(n), atol=1e-10):  # our bug if it ever fires
        raise RuntimeError(f"wavelet {name} at N={n} is not orthonormal")
    return rows


def _register() -> None:
    for name, code in WAVELET_CODES.items():
        register_basis(
            name, code,
            functools.partial(wavelet_matrix, name),
            functools.partial(wavelet_check, name),
        )


_register()
