"""The simulate sweep's plot agrees with its table: one Eb/N0 axis, zero counts as bounds."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from scipy.special import erfc

import codec
from link_sim._simulate import ChannelConfig, sweep, sweep_series, zero_error_bound


@pytest.mark.parametrize("n", [1, 10, 300, 10_000, 10**7])
def test_zero_error_bound_is_clopper_pearson_and_the_rule_of_three(n):
    # Clopper-Pearson: with 0 events in n trials the one-sided 95 % upper bound is the
    # 0.95 quantile of Beta(1, n) (Clopper & Pearson, Biometrika 26, 1934; scipy.stats).
    assert float(zero_error_bound(n)) == pytest.approx(stats.beta.ppf(0.95, 1, n), rel=1e-9)
    if n >= 300:
        # Rule of three, 3 / n (Hanley & Lippman-Hand, JAMA 249, 1983): -ln 0.05 = 2.996.
        assert float(zero_error_bound(n)) == pytest.approx(3.0 / n, rel=0.01)


@pytest.fixture(scope="module")
def rows():
    rng = np.random.default_rng(3)
    t = np.arange(512)
    x = np.column_stack([np.sin(t / 9.0) + 0.1 * rng.standard_normal(t.size),
                         np.cos(t / 23.0) + 0.1 * rng.standard_normal(t.size)])
    prof = codec.Profile(fidelity=0.99).bind(["a", "b"])
    # Low Eb/N0 for errors, high Eb/N0 for none at all after the convolutional code.
    return sweep(x, prof, ChannelConfig("awgn"), [0.0, 2.0, 9.0], fec="conv", trials=2,
                 seed=1)


def test_theory_curve_is_drawn_on_the_same_axis_as_the_measured_points(rows):
    s = sweep_series(rows)
    rate = rows[0]["bits_codec"] / rows[0]["bits_on_air"]
    assert s.code_rate == pytest.approx(rate) and 0.2 < rate < 0.5  # rate 1/2 + sync, tail
    # BPSK channel bits carry Ec = R Eb: BER = erfc(sqrt(R Eb/N0)) / 2 (Proakis 4.3),
    # recomputed with scipy's erfc on the plot's own x grid.
    ecn0 = rate * 10 ** (s.theory_x_db / 10)
    np.testing.assert_allclose(s.theory_channel, 0.5 * erfc(np.sqrt(ecn0)), rtol=1e-10)
    np.testing.assert_allclose(s.theory_uncoded,
                               0.5 * erfc(np.sqrt(10 ** (s.theory_x_db / 10))), rtol=1e-10)
    # The table's theory column is the same curve read at the measured points.
    for r in rows:
        assert np.interp(r["ebn0_db"], s.theory_x_db, np.log10(s.theory_channel)) == \
            pytest.approx(math.log10(r["ber_channel_theory"]), abs=2e-3)
    # And the measured channel BER sits on it (about 1.6 x 10^4 bits a point; binomial
    # spread well under 20 % at these error rates).
    low = s.ebn0_db <= 2.0
    np.testing.assert_allclose(s.ber_channel[low],
                               0.5 * erfc(np.sqrt(rate * 10 ** (s.ebn0_db[low] / 10))), rtol=0.2)


def test_zero_error_points_are_upper_bounds_not_dropped(rows):
    s = sweep_series(rows)
    last = rows[-1]
    assert last["ber_post_fec"] == 0 and last["frame_error_rate"] == 0
    n_bits = last["bits_codec"] * last["trials"]
    n_frames = last["frames_sent"] * last["trials"]
    assert np.isnan(s.ber_post_fec[-1])
    assert s.ber_post_fec_bound[-1] == pytest.approx(1 - 0.05 ** (1 / n_bits))
    assert s.frame_error_rate_bound[-1] == pytest.approx(1 - 0.05 ** (1 / n_frames))
    # Every row has either a measured value or a bound in each BER / FER series.
    for value, bound in ((s.ber_post_fec, s.ber_post_fec_bound),
                         (s.frame_error_rate, s.frame_error_rate_bound),
                         (s.ber_channel, s.ber_channel_bound)):
        assert np.all(np.isfinite(value) ^ np.isfinite(bound))


def test_panels_share_the_x_range_and_show_every_point(rows):
    pytest.importorskip("matplotlib")
    import matplotlib.pyplot as plt

    from link_sim._simulate import sweep_figure

    fig = sweep_figure(rows)
    try:
        limits = {tuple(np.round(a.get_xlim(), 9)) for a in fig.axes}
        s = sweep_series(rows)
        assert limits == {s.x_range}
        # The bound markers lie inside the visible y range of the BER panel.
        lo, hi = fig.axes[0].get_ylim()
        b = s.ber_post_fec_bound[np.isfinite(s.ber_post_fec_bound)]
        assert b.size and np.all((b >= lo) & (b <= hi))
    finally:
        plt.close(fig)
