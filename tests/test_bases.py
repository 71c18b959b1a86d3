"""Every basis against an independent implementation, and its algebra."""

import numpy as np
import pytest
import pywt
import scipy.fft
import scipy.linalg

import codec
from codec import InputError, as_basis, basis_names

BUILTIN = ["identity", "dct", "legendre", "haar", "walsh"]
SIZES = [8, 16, 64, 256]


@pytest.mark.parametrize("name", BUILTIN)
@pytest.mark.parametrize("n", SIZES)
def test_orthonormal_and_parseval(name, n):
    # Orthonormality M M^T = I, hence Parseval: sum x^2 = sum c^2 (any linear-algebra text).
    m = as_basis(name, n).matrix
    assert np.allclose(m @ m.T, np.eye(n), atol=1e-12)
    x = np.random.default_rng(n).normal(size=(5, n))
    c = as_basis(name, n).analyze(x)
    assert np.allclose((x**2).sum(1), (c**2).sum(1), rtol=1e-12)
    assert np.allclose(as_basis(name, n).synthesize(c), x, atol=1e-12)


@pytest.mark.parametrize("n", [2, 7, 8, 100, 256])
def test_dct_matches_scipy(n):
    # Reference: scipy.fft.dct(type=2, norm="ortho"), the orthonormal DCT-II.
    x = np.random.default_rng(1).normal(size=(4, n))
    assert np.allclose(as_basis("dct", n).analyze(x), scipy.fft.dct(x, norm="ortho", axis=1),
                       atol=1e-12)


@pytest.mark.parametrize("n", [2, 8, 64, 256])
def test_walsh_rows_are_hadamard_rows(n):
    # Reference: scipy.linalg.hadamard (Sylvester construction), scaled by 1/sqrt(N);
    # our rows are the same vectors in sequency order.
    ours = as_basis("walsh", n).matrix * np.sqrt(n)
    ref = scipy.linalg.hadamard(n).astype(float)
    assert sorted(map(tuple, ours)) == sorted(map(tuple, ref))
    changes = np.count_nonzero(np.diff(np.sign(ours), axis=1), axis=1)
    assert np.array_equal(changes, np.arange(n))  # row k changes sign k times


@pytest.mark.parametrize("n", [2, 8, 64, 256])
def test_haar_matches_pywavelets(n):
    # Reference: PyWavelets, full-depth wavedec with the orthonormal Haar filter, periodization.
    x = np.random.default_rng(2).normal(size=n)
    ref = np.concatenate(pywt.wavedec(x, "haar", mode="periodization"))
    assert np.allclose(as_basis("haar", n).analyze(x), ref, atol=1e-12)


@pytest.mark.parametrize("n", [8, 33, 64])
def test_legendre_reproduces_polynomials(n):
    # Reference: numpy.polynomial evaluates a random polynomial of degree < k on the grid;
    # the first k rows of the discrete orthonormal polynomial basis must represent it exactly.
    rng = np.random.default_rng(3)
    t = np.linspace(-1, 1, n)
    for k in (1, 3, 6):
        x = np.polynomial.Polynomial(rng.normal(size=k))(t)
        c = as_basis("legendre", n).analyze(x)
        assert np.allclose(c[k:], 0, atol=1e-9 * np.abs(x).max())
        assert np.allclose(as_basis("legendre", n).synthesize(np.r_[c[:k], np.zeros(n - k)]), x,
                           atol=1e-9 * np.abs(x).max())


def test_all_registered_bases_are_listed():
    assert set(BUILTIN) <= set(basis_names())


def test_unknown_basis_and_bad_lengths_are_refused():
    with pytest.raises(InputError, match="unknown basis 'fourier'"):
        as_basis("fourier", 64)
    with pytest.raises(InputError, match="power of two"):
        as_basis("walsh", 48)
    with pytest.raises(InputError, match="power of two"):
        as_basis("haar", 100)
    with pytest.raises(InputError, match="outside"):
        as_basis("dct", 1)


def test_basis_is_cached_and_read_only():
    assert as_basis("dct", 64) is as_basis("dct", 64)
    with pytest.raises(ValueError):
        as_basis("dct", 64).matrix[0, 0] = 1.0
    assert codec.basis_from_code(1, 64).name == "dct"
