"""Rate against the Shannon bound: R(D) of the AR(1) source, and the coder's bits counted whole."""

import importlib.util
import math
from pathlib import Path

import numpy as np
import pytest
from checks import assert_meets_target

import codec

_spec = importlib.util.spec_from_file_location(
    "bench_rate", Path(__file__).resolve().parents[1] / "tools" / "bench_rate.py")
bench = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(bench)


# Cover & Thomas, Elements of Information Theory, 2nd ed., ch. 10: for a Gaussian
# AR(1) process and D below the minimum of its spectrum, sigma^2 (1 - rho)/(1 + rho),
# every frequency is coded and R(D) = 1/2 log2((1 - rho^2) sigma^2 / D).
@pytest.mark.parametrize("rho", [0.5, 0.9, 0.95, 0.99])
@pytest.mark.parametrize("sigma2", [1.0, 3.7])
def test_rd_closed_form_below_spectrum_minimum(rho, sigma2):
    smin = sigma2 * (1 - rho) / (1 + rho)
    for d in (0.9 * smin, 0.3 * smin, 0.01 * smin):
        want = 0.5 * math.log2((1 - rho**2) * sigma2 / d)
        assert bench.rate_distortion_ar1(rho, sigma2, d) == pytest.approx(want, abs=1e-6)


# Cover & Thomas Theorem 10.3.2: a white Gaussian source has R(D) = 1/2 log2(sigma^2 / D)
# for D <= sigma^2 and 0 above.
@pytest.mark.parametrize("d", [1e-4, 0.01, 0.3, 0.99])
def test_rd_white_gaussian(d):
    assert bench.rate_distortion_ar1(0.0, 2.0, 2.0 * d) == pytest.approx(
        0.5 * math.log2(1 / d), abs=1e-9)
    assert bench.rate_distortion_ar1(0.0, 2.0, 2.5) == 0.0


def test_rd_water_filling_regime_is_between_bounds():
    # Above the spectrum minimum some frequencies get no bits: R(D) lies above 0 and
    # above the closed form (which assumes every frequency costs rate; Cover & Thomas).
    rho = 0.95
    d = 0.1
    r = bench.rate_distortion_ar1(rho, 1.0, d)
    assert 0.0 < r and r > 0.5 * math.log2((1 - rho**2) / d)
    assert bench.rate_distortion_ar1(rho, 1.0, 1.0) == 0.0


# Cover & Thomas, Theorem 10.3.3 (parallel Gaussian sources): for independent components with
# variances s_i, R = (1/n) sum 1/2 log2(s_i / theta) over the components with s_i > theta,
# where (1/n) sum min(theta, s_i) = D.
def test_reverse_water_filling_closed_form_on_a_diagonal_source():
    var = np.array([4.0, 1.0, 0.01])
    # Every component above the water level: theta = D.
    d = 0.005
    want = np.mean(0.5 * np.log2(var / d))
    assert bench.reverse_water_filling(var, d) == pytest.approx(want, abs=1e-9)
    # The smallest component below the level: (0.01 + 2 theta) / 3 = D.
    d = 0.2
    theta = (3 * d - 0.01) / 2
    want = (0.5 * math.log2(4.0 / theta) + 0.5 * math.log2(1.0 / theta)) / 3
    assert bench.reverse_water_filling(var, d) == pytest.approx(want, abs=1e-9)
    assert bench.reverse_water_filling(var, var.mean()) == 0.0


@pytest.mark.parametrize("d", [0.01, 0.3])
def test_block_bound_of_a_white_source_is_the_closed_form(d):
    # rho = 0: the N x N covariance is sigma^2 I (diagonal), so R_N(D) = 1/2 log2(sigma^2 / D)
    # for every N (Cover & Thomas, Theorem 10.3.2).
    assert bench.rate_distortion_ar1_block(0.0, 2.0, 2.0 * d, 64) == pytest.approx(
        0.5 * math.log2(1 / d), abs=1e-9)


def test_block_bound_lies_above_the_process_bound_and_tends_to_it():
    # Coding N samples alone can never beat coding the whole process (R_N >= R), and the
    # eigenvalue distribution of the Toeplitz covariance tends to the spectrum as N grows
    # (Grenander & Szego, Toeplitz Forms and Their Applications, 1958), so R_N -> R.
    rho, d = 0.95, 0.01
    inf = bench.rate_distortion_ar1(rho, 1.0, d)
    r16 = bench.rate_distortion_ar1_block(rho, 1.0, d, 16)
    r1024 = bench.rate_distortion_ar1_block(rho, 1.0, d, 1024)
    assert r16 > r1024 > inf - 1e-9
    assert r1024 - inf < 0.01 < r16 - inf
    # Eigenvalues: the trace is N sigma^2 (definition of the covariance).
    assert bench.ar1_covariance_eigenvalues(rho, 1.0, 64).sum() == pytest.approx(64.0)


def test_ar1_source_has_the_model_statistics():
    # variance 1 and lag-1 correlation rho (definition of the AR(1) model)
    x = bench.ar1_source(0.9, 200_000, 5)
    assert np.var(x) == pytest.approx(1.0, rel=0.05)
    assert np.corrcoef(x[:-1], x[1:])[0, 1] == pytest.approx(0.9, abs=0.01)


@pytest.mark.parametrize("fidelity", [0.95, 0.99])
def test_coder_counts_every_bit_and_never_beats_the_bound(fidelity):
    # Shannon's converse (Cover & Thomas, Theorem 10.2.1): no code reaches the
    # distortion below R(D) bits/sample, so a measured rate under it means bits
    # went uncounted.  All frames must meet the target on the decoded samples.
    x = bench.ar1_source(0.95, 64 * 256, 11)
    enc = codec.encode(x[:, None], codec.Profile(frame_length=256, fidelity=fidelity,
                                                 reference="total"))
    dec = codec.decode(enc.data, enc.profile, samples=x.size)
    assert_meets_target(x[:, None], dec.samples, enc.profile)  # budgets recomputed (verify.py)
    bps = 8 * len(enc.data) / x.size
    assert enc.report["bits_per_sample"] == pytest.approx(bps)
    mse = float(np.mean((x - dec.samples[:, 0]) ** 2))
    assert bps > bench.rate_distortion_ar1(0.95, float(np.var(x)), mse)


def test_zstd_baselines_meet_the_error_energy():
    x = bench.ar1_source(0.9, 50_000, 2)
    plain, diff, mse = bench.zstd_baselines(x, 0.01)
    assert mse == pytest.approx(0.01, rel=0.05)  # uniform quantizer: step^2 / 12
    assert 0 < diff < plain < 16
