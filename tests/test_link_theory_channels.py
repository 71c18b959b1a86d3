"""Channel models against closed forms (theory, Gilbert-Elliott stationary mix)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from realdata import motion
from scipy import stats
from scipy.special import erfc

import codec
from codec.stream.search import locate_frames
from link_sim import (
    ChannelConfig,
    GilbertElliott,
    awgn,
    ber_bpsk,
    ber_qpsk_gray,
    bsc,
    erase_frames,
    gilbert_elliott,
    qfunc,
    simulate,
)
from link_sim._fec import make_code


def test_qfunc_matches_scipy_normal_tail():
    # Q(x) is the standard normal survival function (scipy.stats.norm.sf as reference).
    x = np.linspace(-3, 8, 23)
    np.testing.assert_allclose(qfunc(x), stats.norm.sf(x), rtol=1e-12)


def test_textbook_point_9p6_db_gives_1e_minus_5():
    # Sklar, Digital Communications, 2nd ed.: uncoded coherent BPSK needs about
    # 9.6 dB for P_b = 1e-5 (read to two figures in the handbook).
    assert ber_bpsk(9.6) == pytest.approx(1e-5, rel=0.05)


def _within_se(errors: int, n: int, p: float, k: float = 3.0) -> bool:
    """Binomial check: |errors/n - p| <= k standard errors sqrt(p(1-p)/n)."""
    return abs(errors / n - p) <= k * math.sqrt(p * (1 - p) / n)


@pytest.mark.parametrize("ebn0_db", [0.0, 2.0, 4.0, 6.0])
def test_uncoded_bpsk_awgn_matches_q_function(ebn0_db):
    # Proakis & Salehi, Digital Communications 5th ed., sec. 4.3: P_b = Q(sqrt(2 Eb/N0)).
    # Within 3 binomial standard errors of the theory value.
    rng = np.random.default_rng(11 + int(ebn0_db))
    n = 1_000_000
    bits = rng.integers(0, 2, n, dtype=np.uint8)
    errors = int(np.count_nonzero(awgn(bits, ebn0_db, rng, "bpsk") != bits))
    assert _within_se(errors, n, float(ber_bpsk(ebn0_db)))


@pytest.mark.parametrize("ebn0_db", [1.0, 4.0])
def test_gray_qpsk_has_the_bpsk_bit_error_rate(ebn0_db):
    # Proakis & Salehi sec. 4.3: Gray QPSK is two BPSK rails, same P_b at equal Eb/N0.
    rng = np.random.default_rng(5)
    n = 1_000_000
    bits = rng.integers(0, 2, n, dtype=np.uint8)
    errors = int(np.count_nonzero(awgn(bits, ebn0_db, rng, "qpsk") != bits))
    assert ber_qpsk_gray(ebn0_db) == ber_bpsk(ebn0_db)
    assert _within_se(errors, n, float(ber_bpsk(ebn0_db)))


def test_soft_output_sign_is_the_hard_decision():
    rng = np.random.default_rng(3)
    bits = rng.integers(0, 2, 10_001, dtype=np.uint8)
    for mod in ("bpsk", "qpsk"):
        soft = awgn(bits, 3.0, np.random.default_rng(9), mod, soft=True)
        hard = awgn(bits, 3.0, np.random.default_rng(9), mod)
        assert soft.shape == bits.shape
        np.testing.assert_array_equal((soft < 0).astype(np.uint8), hard)


def test_bsc_flip_rate():
    # Binomial: flips ~ B(n, p); within 3 standard errors.
    rng = np.random.default_rng(1)
    n, p = 2_000_000, 3e-3
    bits = rng.integers(0, 2, n, dtype=np.uint8)
    assert _within_se(int(np.count_nonzero(bsc(bits, p, rng) != bits)), n, p)


def test_gilbert_elliott_long_run_rate_is_the_stationary_mix():
    # Gilbert 1960 / Elliott 1963: the state chain has stationary
    # pi_B = p_GB / (p_GB + p_BG); the long-run error rate is pi_G e_G + pi_B e_B.
    m = GilbertElliott(mean_burst=50.0, bad_fraction=0.05, ber_good=1e-3, ber_bad=0.3)
    pi_b = m.p_good_to_bad / (m.p_good_to_bad + m.p_bad_to_good)
    mix = (1 - pi_b) * m.ber_good + pi_b * m.ber_bad
    assert m.stationary_ber() == pytest.approx(mix, rel=1e-12)
    assert pi_b == pytest.approx(0.05, rel=1e-12)
    n = 4_000_000
    rng = np.random.default_rng(2)
    bits = np.zeros(n, np.uint8)
    rate = np.count_nonzero(gilbert_elliott(bits, m, rng)) / n
    # Standard error of a time average of a two-state Markov chain: the state part
    # has variance pi_B pi_G (e_B - e_G)^2 inflated by (1 + lam) / (1 - lam), lam =
    # 1 - p_GB - p_BG its second eigenvalue; plus the binomial part given the states.
    lam = 1 - m.p_good_to_bad - m.p_bad_to_good
    var = (pi_b * (1 - pi_b) * (m.ber_bad - m.ber_good) ** 2 * (1 + lam) / (1 - lam)
           + mix * (1 - mix)) / n
    assert abs(rate - mix) <= 4 * math.sqrt(var)


def test_gilbert_elliott_mean_burst_length():
    # Stays in the bad state are geometric with mean 1 / p_BG = mean_burst.
    m = GilbertElliott(mean_burst=30.0, bad_fraction=0.1, ber_good=0.0, ber_bad=1.0)
    s = m.states(2_000_000, np.random.default_rng(4)).astype(np.int8)
    edges = np.diff(np.concatenate([[0], s, [0]]))
    runs = np.flatnonzero(edges == -1) - np.flatnonzero(edges == 1)
    se = runs.std(ddof=1) / math.sqrt(runs.size)
    assert abs(runs.mean() - 30.0) <= 4 * se


def test_erasure_rate():
    keep = erase_frames(200_000, 0.1, np.random.default_rng(0))
    assert _within_se(int((~keep).sum()), keep.size, 0.1)


@pytest.mark.parametrize("fec", ["none", "hamming74", "rs255", "conv"])
def test_simulator_theory_columns_charge_the_code_rate(fec):
    # The simulator's theory column: with Eb the energy per codec bit and r codec bits per
    # bit on air, each channel bit carries r Eb, so coherent BPSK errs at
    # P = Q(sqrt(2 r Eb/N0)) = erfc(sqrt(r Eb/N0)) / 2 (Proakis & Salehi, 5th ed., sec. 4.3;
    # erfc from scipy.special).  r is counted here from the bits the code actually puts on
    # air, and the measured channel BER must agree with that P within 4 binomial standard
    # errors; an uncoded frame survives only if all its bits do.
    x = motion("train")[:1024, :3]
    enc = codec.encode(x, codec.Profile(frame_length=64))
    ebn0_db = 4.0
    r = simulate(x, enc.profile, ChannelConfig("awgn", ebn0_db=ebn0_db), fec=fec, trials=1,
                 seed=7, enc=enc)
    air = make_code(fec).encode(np.frombuffer(enc.data, np.uint8)).size
    rate = 8 * len(enc.data) / air
    assert (rate == 1.0) == (fec == "none")
    p = 0.5 * erfc(math.sqrt(rate * 10 ** (ebn0_db / 10)))
    assert r["ber_channel_theory"] == pytest.approx(p, rel=1e-12)
    assert _within_se(round(r["ber_channel"] * air), air, p, k=4.0)
    if fec == "none":
        bits = 8 * locate_frames(enc.data).lengths
        assert r["frame_error_rate_theory"] == pytest.approx(np.mean(1 - (1 - p) ** bits),
                                                             rel=1e-12)
