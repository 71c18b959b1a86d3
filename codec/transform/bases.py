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

Sender and receiver must hold the same matrix bit for bit, so every built-in
basis is built only from IEEE-754 operations that are correctly rounded on
every machine (+, -, *, /, sqrt, exact scaling by powers of two) applied in a
fixed order: no matrix product, factorisation or FFT whose result depends on
the BLAS kernel, the SIMD width or the thread count.  The one transcendental
table (the cosines of the DCT) is computed in multi-precision arithmetic and
rounded once.  :func:`basis_fingerprint` hashes a matrix so two ends can check
that they agree.
"""

from __future__ import annotations

import functools
import hashlib
import importlib
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from .._errors import InputError

__all__ = [
    "Basis",
    "alternate_basis",
    "as_basis",
    "has_alternate_basis",
    "basis_from_code",
    "basis_names",
    "basis_fingerprint",
    "register_basis",
    "MAX_FRAME_LENGTH",
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

    Examples
    --------
    The orthonormal DCT-II of 8 points is an orthonormal matrix, and its
    analysis is SciPy's ``dct(x, norm="ortho")`` (the reference implementation):

    >>> import numpy as np, scipy.fft
    >>> b = as_basis("dct", 8)
    >>> bool(np.allclose(b.matrix @ b.matrix.T, np.eye(8), atol=1e-15))
    True
    >>> x = np.arange(16.0).reshape(2, 8)
    >>> bool(np.allclose(b.analyze(x), scipy.fft.dct(x, norm="ortho", axis=1)))
    True
    >>> bool(np.allclose(b.synthesize(b.analyze(x)), x))
    True
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
#: Modules that register further bases when imported; loaded on the first look-up
#: (not at ``import codec``), so starting the command line stays fast.
_PLUGINS = [".wavelets", ".klt"]


def _kinds() -> dict[str, _Kind]:
    while _PLUGINS:
        importlib.import_module(_PLUGINS.pop(0), __package__)
    return _KINDS


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

    Raises
    ------
    ValueError
        If the name is registered already, or the code is taken or outside 0-255.

    Examples
    --------
    A name or a header code can be registered once only:

    >>> import numpy as np
    >>> register_basis("dct", 200, np.eye)
    Traceback (most recent call last):
    ...
    ValueError: basis 'dct' is registered already
    >>> register_basis("my_dct", as_basis("dct", 8).code, np.eye)
    Traceback (most recent call last):
    ...
    ValueError: basis code 1 is taken or outside 0-255
    """
    if name in _kinds():  # the built-in plugins first, so their names and codes stay theirs
        raise ValueError(f"basis {name!r} is registered already")
    if any(k.code == code for k in _KINDS.values()) or not 0 <= code <= 255:
        raise ValueError(f"basis code {code} is taken or outside 0-255")
    _KINDS[name] = _Kind(code, build, check or (lambda n: None))


def basis_names() -> list[str]:
    """Names of every registered basis, in code order.

    Returns
    -------
    list of str
        The built-in bases, the wavelet bases and ``klt`` (trained), then any
        registered by other modules.

    Examples
    --------
    >>> basis_names()[:5]
    ['identity', 'dct', 'legendre', 'haar', 'walsh']
    >>> {"db4", "sym6", "klt"} <= set(basis_names())
    True
    """
    kinds = _kinds()
    return sorted(kinds, key=lambda k: kinds[k].code)


def as_basis(basis: str | Basis, n: int) -> Basis:
    """Return the basis called ``basis`` for frames of ``n`` samples.

    Parameters
    ----------
    basis : str or Basis
        A registered name (:func:`basis_names`), or a :class:`Basis`, which
        passes through after its length is checked.
    n : int
        Frame length, 2 to :data:`MAX_FRAME_LENGTH`.

    Returns
    -------
    Basis
        The basis; built once per (name, n) and cached.

    Raises
    ------
    InputError
        For an unknown name or a length the basis does not allow.

    Examples
    --------
    The Haar basis of 8 points: its first row is the constant 1/sqrt(8), its
    last rows are the finest differences (Haar 1910):

    >>> import numpy as np
    >>> h = as_basis("haar", 8)
    >>> bool(np.allclose(h.matrix[0], 1 / np.sqrt(8)))
    True
    >>> bool(np.allclose(h.matrix @ h.matrix.T, np.eye(8)))
    True
    >>> as_basis("haar", 12)
    Traceback (most recent call last):
    ...
    codec._errors.InputError: basis 'haar' cannot use frame length 12: it needs a power of two; ...
    """
    if isinstance(basis, Basis):
        if basis.n != n:
            raise InputError(
                f"basis {basis.name!r} has length {basis.n} but frames have {n} samples; "
                "use a basis built for this frame length"
            )
        return basis
    if basis not in _kinds():
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
    """The registered basis whose header code is ``code``.

    Parameters
    ----------
    code : int
        The basis code of a frame header (0-255).
    n : int
        Frame length.

    Returns
    -------
    Basis
        As :func:`as_basis` returns it.

    Raises
    ------
    InputError
        When no registered basis has this code.

    Examples
    --------
    >>> basis_from_code(as_basis("walsh", 16).code, 16).name
    'walsh'
    """
    for name, kind in _kinds().items():
        if kind.code == code:
            return as_basis(name, n)
    raise InputError(f"basis code {code} is not known to this version of coefwire")


def alternate_basis(code: int, n: int) -> Basis | None:
    """The basis a frame may switch a channel to instead of the profile's (layout 6).

    The Haar basis when the profile's basis is the DCT and N is a power of
    two; otherwise None (no switch).  Both have the constant vector first, so
    the window mean is sent and removed alike on either basis, and both are
    orthonormal, so a budget holds the same way on either.  The Haar basis
    codes windows of isolated bursts (rain, events, switching) in fewer bits
    than the DCT, which spreads a burst over every coefficient.

    Parameters
    ----------
    code : int
        The profile basis's header code.
    n : int
        Frame length.

    Returns
    -------
    Basis or None
        The alternate basis.

    Examples
    --------
    >>> dct = as_basis("dct", 64)
    >>> alternate_basis(dct.code, 64).name
    'haar'
    >>> alternate_basis(dct.code, 48) is None, alternate_basis(as_basis("haar", 64).code, 64)
    (True, None)
    """
    return as_basis("haar", int(n)) if has_alternate_basis(code, n) else None


def has_alternate_basis(code: int, n: int) -> bool:
    """Whether :func:`alternate_basis` has a basis for this profile basis and N.

    Builds no matrix: what a frame parser asks to know whether a layout-6
    frame carries the basis field.

    Parameters
    ----------
    code : int
        The profile basis's header code.
    n : int
        Frame length.

    Returns
    -------
    bool
        True for the DCT at a power-of-two N.

    Examples
    --------
    >>> has_alternate_basis(as_basis("dct", 8).code, 8), has_alternate_basis(0, 8)
    (True, False)
    """
    return code == _kinds()["dct"].code and not _power_of_two(int(n))


@functools.lru_cache(maxsize=64)
def _cached(name: str, n: int) -> Basis:
    matrix = np.ascontiguousarray(_KINDS[name].build(n), dtype=np.float64)
    matrix.setflags(write=False)
    return Basis(name, _KINDS[name].code, matrix)


def basis_fingerprint(matrix: np.ndarray) -> str:
    """SHA-256 (hex) of a basis matrix rounded to multiples of 2**-32.

    Two ends that build the same basis get the same fingerprint; a basis that
    differs by more than rounding gets another one.

    Parameters
    ----------
    matrix : array_like, shape (n, n)
        The basis matrix.

    Returns
    -------
    str
        64 hexadecimal digits.

    Examples
    --------
    A change far below 2**-32 keeps the fingerprint; another basis changes it:

    >>> import numpy as np
    >>> m = as_basis("dct", 8).matrix
    >>> basis_fingerprint(m) == basis_fingerprint(m + 1e-14)
    True
    >>> basis_fingerprint(m) == basis_fingerprint(as_basis("legendre", 8).matrix)
    False
    """
    q = np.rint(np.asarray(matrix, dtype=np.float64) * 2.0**32).astype("<i8")
    return hashlib.sha256(q.tobytes()).hexdigest()


def _power_of_two(n: int) -> str | None:
    return None if n & (n - 1) == 0 else "needs a power of two"


def _identity(n: int) -> np.ndarray:
    return np.eye(n)


def _dct(n: int) -> np.ndarray:
    # Orthonormal DCT-II from its closed form (Ahmed, Natarajan & Rao, 1974):
    # M[k, i] = s_k cos(pi (2i + 1) k / (2N)), s_0 = sqrt(1/N), s_k = sqrt(2/N).
    # The angle is reduced exactly in integers to a quarter period, and the
    # N + 1 cosines of the quarter period come from a correctly rounded table,
    # so the matrix is the same on every machine (an FFT's rounding is not).
    m = (2 * np.arange(n)[None, :] + 1) * np.arange(n)[:, None] % (4 * n)
    quarter = _quarter_cosines(n)
    value = np.where(m <= n, quarter[np.minimum(m, n)], 0.0)
    value = np.where((m > n) & (m <= 2 * n), -quarter[np.clip(2 * n - m, 0, n)], value)
    value = np.where((m > 2 * n) & (m <= 3 * n), -quarter[np.clip(m - 2 * n, 0, n)], value)
    value = np.where(m > 3 * n, quarter[np.clip(4 * n - m, 0, n)], value)
    scale = np.full((n, 1), np.sqrt(2.0 / n))
    scale[0] = np.sqrt(1.0 / n)
    return scale * value


@functools.lru_cache(maxsize=8)
def _quarter_cosines(n: int) -> np.ndarray:
    """cos(pi j / (2n)) for j = 0..n, each correctly rounded to float64.

    Computed with mpmath at 120 bits and rounded once, so no libm or SIMD
    variant of ``cos`` can change a bit.
    """
    import mpmath  # only here: a table of at most MAX_FRAME_LENGTH + 1 values

    with mpmath.workprec(120):
        return np.array([float(mpmath.cospi(mpmath.mpf(j) / (2 * n))) for j in range(n + 1)])


def _legendre(n: int) -> np.ndarray:
    """Discrete orthonormal (Gram) polynomials on the grid x = 0..n-1, degree by row.

    Row k is t_k(x), the orthonormal polynomial of degree k on n equally spaced
    points, with a positive leading coefficient.  Both constructions are
    three-term recurrences built from +, -, *, / and sqrt only:

    * degrees below sqrt(n): the orthonormal recurrence in the degree, in
      u = 2x + 1 - n, which is stable while t_k has no small tails;
    * higher degrees: the recurrence in x, run from the ends (where t_k is
      exponentially small) to the middle and mirrored by t_k(n-1-x) =
      (-1)^k t_k(x); in this direction the wanted solution is the growing one,
      so rounding errors do not grow (Mukundan 2004).  Values are kept as
      mantissa times a power of two, so nothing underflows even at n = 4096.

    References
    ----------
    R. Mukundan, "Some computational aspects of discrete orthonormal moments",
    IEEE Trans. Image Processing 13 (2004) 1055-1059.
    W. Gautschi, Orthogonal Polynomials: Computation and Approximation,
    Oxford 2004, sec. 1.5 (discrete Chebyshev polynomials).
    """
    matrix = np.empty((n, n))
    low = min(n, max(2, math.isqrt(n)))
    matrix[:low] = _gram_by_degree(n, low)
    if low < n:
        matrix[low:] = _gram_by_position(n, low)
    return matrix


def _gram_by_degree(n: int, rows: int) -> np.ndarray:
    # Orthonormal recurrence t_k = (u t_{k-1} - sqrt(b_{k-1}) t_{k-2}) / sqrt(b_k) with
    # u = 2x + 1 - n and b_k = k^2 (n^2 - k^2) / (4 k^2 - 1): the recurrence coefficients
    # of the discrete Chebyshev polynomials (Gautschi 2004, ch. 1, written for u; from
    # memory, and held by tests/test_bases_exact.py against exact integer arithmetic).
    u = 2.0 * np.arange(n) + 1.0 - n
    out = np.empty((rows, n))
    out[0] = np.sqrt(1.0 / n)
    out[1] = u * np.sqrt(3.0 / (n * (n * n - 1.0)))

    def b(k: int) -> float:
        return (k * k * (n * n - k * k)) / (4.0 * k * k - 1.0)

    for k in range(2, rows):
        out[k] = u * out[k - 1] * (1.0 / np.sqrt(b(k))) - out[k - 2] * np.sqrt(b(k - 1) / b(k))
    return out


_SCALE = 500  # rescale by 2**±500: far from both overflow (2**1024) and underflow (2**-1022)


def _gram_by_position(n: int, first: int) -> np.ndarray:
    # Mukundan (2004), for degrees k = first..n-1 at once (held by the exact tests):
    #   t_k(0) = -sqrt((n - k)(2k + 1) / ((n + k)(2k - 1))) t_{k-1}(0),  t_0(0) = 1/sqrt(n)
    #   t_k(1) = (1 + k(k + 1) / (1 - n)) t_k(0)
    #   t_k(x) = g1 t_k(x - 1) + g2 t_k(x - 2),
    #     g1 = (-k(k + 1) - (2x - 1)(x - n - 1) - x) / (x (n - x)),
    #     g2 = (x - 1)(x - n - 1) / (x (n - x)).
    # t_k(0) is about 2**-k, so it is carried as mantissa * 2**exponent.
    mant = np.empty(n)
    expo = np.zeros(n, dtype=np.int64)
    m, e = 1.0 / math.sqrt(n), 0
    mant[0] = m
    for k in range(1, n):
        m = -m * math.sqrt(((n - k) * (2 * k + 1)) / ((n + k) * (2 * k - 1)))
        if abs(m) < 2.0**-_SCALE:
            m, e = m * 2.0**_SCALE, e - _SCALE
        mant[k], expo[k] = m, e
    k = np.arange(first, n, dtype=np.float64)
    kk1 = k * (k + 1.0)
    mant, expo = mant[first:], expo[first:]
    half = (n + 1) // 2
    cols = np.empty((half, n - first))  # cols[x] = t_k(x) for every k
    prev2 = mant
    prev1 = (1.0 + kk1 / (1.0 - n)) * mant
    cols[0] = np.ldexp(prev2, expo)
    if half > 1:
        cols[1] = np.ldexp(prev1, expo)
    for x in range(2, half):
        g1 = (-kk1 - float((2 * x - 1) * (x - n - 1) + x)) / float(x * (n - x))
        g2 = float((x - 1) * (x - n - 1)) / float(x * (n - x))
        cur = g1 * prev1 + g2 * prev2
        big = np.abs(cur) > 2.0**_SCALE
        if big.any():
            shrink = np.where(big, 2.0**-_SCALE, 1.0)
            cur, prev1 = cur * shrink, prev1 * shrink
            expo = expo + np.where(big, _SCALE, 0)
        cols[x] = np.ldexp(cur, expo)
        prev2, prev1 = prev1, cur
    rows = np.empty((n - first, n))
    rows[:, :half] = cols.T
    sign = np.where(np.arange(first, n) % 2 == 0, 1.0, -1.0)[:, None]
    rows[:, half:] = sign * rows[:, n - 1 - np.arange(half, n)]
    if n % 2:
        rows[np.arange(first, n) % 2 == 1, n // 2] = 0.0  # odd polynomials vanish at the centre
    return rows


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
    import scipy.linalg  # loaded on first use (slow to import)

    h = scipy.linalg.hadamard(n).astype(np.float64) / np.sqrt(n)
    changes = np.count_nonzero(np.diff(np.sign(h), axis=1), axis=1)
    return h[np.argsort(changes, kind="stable")]


register_basis("identity", 0, _identity)
register_basis("dct", 1, _dct)
register_basis("legendre", 2, _legendre)
register_basis("haar", 3, _haar, _power_of_two)
register_basis("walsh", 4, _walsh, _power_of_two)


