"""Daubechies and symlet bases against PyWavelets and the published filters."""

from __future__ import annotations

import math

import numpy as np
import pytest
import pywt
from checks import assert_meets_target

import codec
from codec.transform.wavelets import WAVELET_CODES, wavelet_depth, wavelet_matrix

NAMES = list(WAVELET_CODES)


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize("n", [64, 128])
def test_transform_agrees_with_pywavelets(name, n):
    # Source: PyWavelets' own multilevel DWT, pywt.wavedec(..., mode="periodization"),
    # an independent implementation of the same periodised filter bank.
    basis = codec.as_basis(name, n)
    rng = np.random.default_rng(n)
    x = rng.normal(size=(4, n))
    level = pywt.dwt_max_level(n, pywt.Wavelet(name).dec_len)
    ref = np.concatenate(pywt.wavedec(x, name, mode="periodization", level=level, axis=-1),
                         axis=-1)
    np.testing.assert_allclose(basis.analyze(x), ref, atol=1e-12)
    # and back: synthesis matches pywt.waverec
    coeffs = pywt.wavedec(x, name, mode="periodization", level=level, axis=-1)
    np.testing.assert_allclose(basis.synthesize(basis.analyze(x)),
                               pywt.waverec(coeffs, name, mode="periodization", axis=-1),
                               atol=1e-12)


@pytest.mark.parametrize("name", ["db4", "sym6"])
def test_chosen_depth_agrees_with_pywavelets(name):
    # Source: pywt.wavedec at an explicit level.
    x = np.random.default_rng(3).normal(size=(2, 64))
    for depth in (1, 2):
        m = wavelet_matrix(name, 64, depth)
        ref = np.concatenate(pywt.wavedec(x, name, mode="periodization", level=depth,
                                          axis=-1), axis=-1)
        np.testing.assert_allclose(x @ m.T, ref, atol=1e-12)
        np.testing.assert_allclose(m @ m.T, np.eye(64), atol=1e-12)


@pytest.mark.parametrize("name", NAMES)
def test_orthonormal_and_codes(name):
    m = codec.as_basis(name, 64).matrix
    np.testing.assert_allclose(m @ m.T, np.eye(64), atol=1e-12)
    assert codec.basis_from_code(WAVELET_CODES[name], 64).name == name
    assert wavelet_depth(name, 64) >= 1


def test_db2_filter_is_the_published_one():
    # Source: Daubechies (1988), the four-tap filter h = (1+s3, 3+s3, 3-s3, 1-s3) / (4 sqrt 2),
    # s3 = sqrt(3) (PyWavelets lists the decomposition low-pass reversed).
    s3 = math.sqrt(3.0)
    h = np.array([1 + s3, 3 + s3, 3 - s3, 1 - s3]) / (4 * math.sqrt(2))
    np.testing.assert_allclose(pywt.Wavelet("db2").dec_lo[::-1], h, atol=1e-12)
    # the scaling row of a depth-1 db2 basis is that filter, wrapped periodically
    row = wavelet_matrix("db2", 8, 1)[0]
    assert np.isclose(np.sort(np.abs(row[row != 0])), np.sort(np.abs(h))).all()


def test_short_or_odd_frames_are_refused_clearly():
    with pytest.raises(codec.InputError, match="power of two of at least 64"):
        codec.as_basis("db10", 32)
    with pytest.raises(codec.InputError, match="power of two"):
        codec.as_basis("db4", 48)


def test_wavelet_basis_round_trip_meets_target():
    x = np.cumsum(np.random.default_rng(5).normal(size=(1024, 2)), axis=0)
    prof = codec.Profile(basis="sym5", fidelity=0.98, frame_length=64)
    enc = codec.encode(x, prof)
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert_meets_target(x, dec.samples, enc.profile)  # budgets recomputed (verify.py)
    np.testing.assert_array_equal(dec.samples, enc.reconstruction)
