"""Orthonormal N x N bases that encoder and decoder agree on.

Each basis is a matrix whose rows are the basis vectors, so for a 2-D array of
frames (one frame per row) the coefficients are ``frames @ M.T`` and the
synthesis is ``coeffs @ M``.  Because every matrix is orthonormal, Parseval's
relation holds: the energy of dropped or mis-quantized coefficients equals the
energy of the error in the samples, which is what makes the fidelity guarantee
exact.

Bases are named (``identity``, ``dct``, ``legendre``, ``haar``, ``walsh``) and
carry a small numeric code that goes into every frame header.  Other modules
add bases with :func:`register_basis`.
"""

from __future__ import annotations

import functools
import hashlib
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.fft
import scipy.linalg

from ._errors import InputError

__all__ = [
    "Basis",
    "as_basis",
    "basis_from_code",
    "basis_names",
    "register_basis",
    "MAX_FRAME_LENGTH",
    "basis_fingerprint",
]

#: Longest frame any basis accepts; the frame layout sizes its fields for it.
MAX_FRAME_LENGTH = 4096


@dataclass(frozen=True, eq=False)
class Basis:
    """An orthonormal basis for frames of ``n`` samples.

    Attributes
    ----------
    name : str
        The name used on the command line and in profiles.
    code : int
        The number written in frame headers (0-255).
    matrix : ndarray, shape (n, n)
        Rows are the basis vectors; read-only.
    """

    name: str
    code: int
    matrix: np.ndarray

    @property
    def n(self) -> int:
        return self.matrix.shape[0]

    def analyze(self, frames: np.ndarray) -> np.ndarray:
        """Coefficients of each row of ``frames`` (shape (..., n))."""
        return frames @ self.matrix.T

    def synthesize(self, coeffs: np.ndarray) -> np.ndarray:
        """Samples from coefficients; the exact inverse of :meth:`analyze`."""
        return coeffs @ self.matrix


@dataclass(frozen=True)
class _Kind:
    code: int
    build: Callable[[int], np.ndarray]
    check: Callable[[int], str | None]


_KINDS: dict[str, _Kind] = {}


def register_basis(
    name: str,
    code: int,
    build: Callable[[int], np.ndarray],
    check: Callable[[int], str | None] | None = None,
) -> None:
    """Add a named basis.

    Parameters
    ----------
    name : str
        Name used on the command line and in profiles.
    code : int
        Header code, unique, 0-255.
    build : callable
        ``build(n)`` returns the orthonormal (n, n) matrix, rows = vectors.
    check : callable, optional
        ``check(n)`` returns None when ``n`` is allowed, else the reason
        (a sentence fragment such as "needs a power of two").
    """
    if name in _KINDS:
        raise ValueError(f"basis {name!r} is registered already")
    if any(k.code == code for k in _KINDS.values()) or not 0 <= code <= 255:
        raise ValueError(f"basis code {code} is taken or outside 0-255")
    _KINDS[name] = _Kind(code, build, check or (lambda n: None))


def basis_names() -> list[str]:
    """Names of every registered basis, in code order."""
    return sorted(_KINDS, key=lambda k: _KINDS[k].code)


def as_basis(basis: str | Basis, n: int) -> Basis:
    """Return the basis called ``basis`` for frames of ``n`` samples.

    A :class:`Basis` passes through after its length is checked.  Unknown
    names and lengths a basis does not allow raise :class:`InputError`.
    """
    if isinstance(basis, Basis):
        if basis.n != n:
            raise InputError(
                f"basis {basis.name!r} has length {basis.n} but frames have {n} samples; "
                "use a basis built for this frame length"
            )
        return basis
    if basis not in _KINDS:
        raise InputError(
            f"unknown basis {basis!r}; choose one of: {', '.join(basis_names())}"
        )
    if not isinstance(n, int | np.integer) or not 2 <= n <= MAX_FRAME_LENGTH:
        raise InputError(
            f"frame length {n} is outside 2-{MAX_FRAME_LENGTH}; choose a length in that range"
        )
    reason = _KINDS[basis].check(int(n))
    if reason:
        raise InputError(
            f"basis {basis!r} cannot use frame length {n}: it {reason}; "
            "choose another frame length or basis"
        )
    return _cached(basis, int(n))


def basis_from_code(code: int, n: int) -> Basis:
    """The registered basis whose header code is ``code``."""
    for name, kind in _KINDS.items():
        if kind.code == code:
            return as_basis(name, n)
    raise InputError(f"basis code {code} is not known to this version of coefwire")


@functools.lru_cache(maxsize=64)
def _cached(name: str, n: int) -> Basis:
    matrix = np.ascontiguousarray(_KINDS[name].build(n), dtype=np.float64)
    matrix.setflags(write=False)
    return Basis(name, _KINDS[name].code, matrix)


def _power_of_two(n: int) -> str | None:
    return None if n & (n - 1) == 0 else "needs a power of two"


def _identity(n: int) -> np.ndarray:
    return np.eye(n)


def _dct(n: int) -> np.ndarray:
    # Orthonormal DCT-II: row k is the k-th cosine (Ahmed, Natarajan & Rao, 1974).
    return scipy.fft.dct(np.eye(n), type=2, norm="ortho", axis=0)


def _legendre(n: int) -> np.ndarray:
    # Discrete orthonormal polynomials: orthonormalise the degree-graded
    # polynomials on the frame grid.  Legendre polynomials span the same nested
    # spaces as the monomials but are far better conditioned, so QR keeps the
    # span of the first k rows equal to polynomials of degree < k.
    t = np.linspace(-1.0, 1.0, n)
    vander = np.polynomial.legendre.legvander(t, n - 1)
    q, r = np.linalg.qr(vander)
    q *= np.sign(np.diag(r))  # leading coefficient of each polynomial positive
    return q.T


def _haar(n: int) -> np.ndarray:
    # Full-depth orthonormal Haar: rows ordered [scaling, coarsest detail, ..., finest detail],
    # the order of pywt.wavedec(..., "haar", mode="periodization").
    rows = [np.full(n, 1.0 / np.sqrt(n))]
    size = n
    while size > 1:
        half = size // 2
        count = n // size
        block = np.zeros((count, n))
        amp = 1.0 / np.sqrt(size)
        for j in range(count):
            block[j, j * size : j * size + half] = amp
            block[j, j * size + half : (j + 1) * size] = -amp
        rows.append(block)
        size = half
    return np.vstack(rows)


def _walsh(n: int) -> np.ndarray:
    # Walsh-Hadamard rows in sequency order (number of sign changes), so low
    # indices are slow patterns like the other bases.
    h = scipy.linalg.hadamard(n).astype(np.float64) / np.sqrt(n)
    changes = np.count_nonzero(np.diff(np.sign(h), axis=1), axis=1)
    return h[np.argsort(changes, kind="stable")]


register_basis("identity", 0, _identity)
register_basis("dct", 1, _dct)
register_basis("legendre", 2, _legendre)
register_basis("haar", 3, _haar, _power_of_two)
register_basis("walsh", 4, _walsh, _power_of_two)


def basis_fingerprint(matrix: np.ndarray) -> str:
    """SHA-256 (hex) of a basis matrix rounded to multiples of 2**-32.

    Two ends that build the same basis get the same fingerprint; a basis that
    differs by more than rounding gets another one.
    """
    q = np.rint(np.asarray(matrix, dtype=np.float64) * 2.0**32).astype("<i8")
    return hashlib.sha256(q.tobytes()).hexdigest()
