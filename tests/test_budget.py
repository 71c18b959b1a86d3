"""Link budget arithmetic checked against published formulas, constants and textbook values."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.special import erfc

from codec import ProfileError
from link_sim._budget import (
    BOLTZMANN_J_K,
    compute_budget,
    fspl_db,
    noise_temperature_k,
    required_ebn0,
)
from link_sim._linkfile import link_from_dict

C = 299_792_458.0  # m/s, exact (SI definition of the metre)


def _link(**changes):
    base = dict(frequency_hz=437e6, distance_m=1.0e6, tx_power_w=1.0, tx_antenna_gain_dbi=0.0,
                rx_antenna_gain_dbi=10.0, system_noise_temperature_k=500.0, data_rate_bps=9600.0,
                modulation="bpsk", fec="none", target_ber=1e-5, required_margin_db=3.0)
    base.update(changes)
    return link_from_dict(base)


@pytest.mark.parametrize("f_hz,d_m", [(437e6, 1.0e6), (868e6, 15e3), (2.4e9, 100.0),
                                      (145.8e6, 2.0e6), (8.4e9, 3.6e7), (10e9, 1.0)])
def test_fspl_matches_itu_r_p525_practical_form(f_hz, d_m):
    # ITU-R P.525: L_bf = 32.45 + 20 log10(f / MHz) + 20 log10(d / km); the constant is
    # 20 log10(4 pi 1e9 / c) = 32.4478 rounded, so the two forms agree to 0.01 dB.
    p525 = 32.45 + 20 * math.log10(f_hz / 1e6) + 20 * math.log10(d_m / 1e3)
    assert float(fspl_db(d_m, f_hz)) == pytest.approx(p525, abs=0.01)


def test_fspl_hand_worked_437mhz_1000km():
    # By hand: lambda = c / f = 299792458 / 437e6 = 0.686024 m;
    # 4 pi d / lambda = 4 pi * 1e6 / 0.686024 = 1.831769e7; 20 log10(1.831769e7) = 145.257 dB.
    # (From memory "about 145.26 dB" before recomputing.)
    assert float(fspl_db(1.0e6, 437e6)) == pytest.approx(145.257, abs=0.002)


def test_boltzmann_in_dbw_per_k_hz():
    # SI 2019 fixes k = 1.380649e-23 J/K exactly; 10 log10(k) = -228.599 dBW/(K Hz),
    # the -228.6 of every link-budget handbook.
    assert BOLTZMANN_J_K == 1.380649e-23
    assert 10 * math.log10(BOLTZMANN_J_K) == pytest.approx(-228.6, abs=0.005)
    line = next(x for x in compute_budget(_link()).lines if x.item == "Boltzmann constant")
    assert line.value == pytest.approx(-228.6, abs=0.005)


def test_noise_figure_3db_is_about_289k():
    # IEEE definition of noise figure: F = 1 + T_e / T0 with T0 = 290 K, so NF = 3 dB gives
    # T_e = 290 (10^0.3 - 1) = 288.6 K ("about 289 K").
    assert noise_temperature_k(3.0) == pytest.approx(288.6, abs=0.05)
    assert noise_temperature_k(0.0) == 0.0
    # And the budget adds the antenna temperature to it.
    b = compute_budget(_link(system_noise_temperature_k=None, noise_figure_db=3.0,
                             antenna_temperature_k=100.0))
    assert b.figures["system_noise_temperature_k"] == pytest.approx(388.6, abs=0.05)


def test_required_ebn0_uncoded_bpsk_textbook_value():
    # Sklar, Digital Communications (2nd ed.), the usual "BPSK needs 9.6 dB for 1e-5".
    req = required_ebn0("bpsk", "none", 1e-5)
    assert req.ebn0_db == pytest.approx(9.6, abs=0.05)
    # The inversion is exact on the closed form, recomputed here with scipy's erfc:
    # Pb = Q(sqrt(2 Eb/N0)) = erfc(sqrt(Eb/N0)) / 2 (Proakis, Digital Communications, 4.3).
    ebn0 = 10 ** (req.ebn0_db / 10)
    assert 0.5 * erfc(math.sqrt(ebn0)) == pytest.approx(1e-5, rel=1e-6)
    assert "Q(" in req.source


@pytest.mark.parametrize("ber", [1e-3, 1e-6, 1e-9])
def test_gray_qpsk_needs_the_same_ebn0_as_bpsk(ber):
    # Proakis 4.3: Gray-coded QPSK has the bit error rate of BPSK at equal Eb/N0.
    assert required_ebn0("qpsk", "none", ber).ebn0_db == pytest.approx(
        required_ebn0("bpsk", "none", ber).ebn0_db, abs=1e-6)


def test_required_ebn0_grows_as_target_ber_falls():
    vals = [required_ebn0("bpsk", "none", b).ebn0_db for b in (1e-2, 1e-4, 1e-6, 1e-8)]
    assert all(a < b for a, b in zip(vals, vals[1:]))


def test_coded_without_measured_curve_is_refused(tmp_path):
    # Never invent a coded number: no curve file means a clear error, not a value.
    with pytest.raises(ProfileError, match="rs255"):
        required_ebn0("bpsk", "rs255", 1e-5, curves_path=tmp_path / "absent.json")


def test_raising_power_3db_raises_margin_3db():
    # Margin arithmetic (everything in dB adds): P -> P * 10^0.3 is +3 dB of EIRP.
    a = compute_budget(_link(tx_power_w=1.0)).figures
    b = compute_budget(_link(tx_power_w=10 ** 0.3)).figures
    assert b["margin_db"] - a["margin_db"] == pytest.approx(3.0, abs=1e-9)
    assert b["eirp_dbw"] - a["eirp_dbw"] == pytest.approx(3.0, abs=1e-9)


def test_doubling_data_rate_lowers_ebn0_by_3_01db():
    # Eb/N0 = C/N0 - 10 log10 R, and 10 log10 2 = 3.0103.
    a = compute_budget(_link(data_rate_bps=4800.0)).figures
    b = compute_budget(_link(data_rate_bps=9600.0)).figures
    assert a["ebn0_db"] - b["ebn0_db"] == pytest.approx(3.0103, abs=1e-4)
    assert a["cn0_dbhz"] == pytest.approx(b["cn0_dbhz"], abs=1e-12)


def test_max_data_rate_leaves_exactly_the_required_margin():
    b = compute_budget(_link(required_margin_db=6.0))
    r_max = b.figures["max_data_rate_bps"]
    assert float(b.margin_db(r_max)) == pytest.approx(6.0, abs=1e-9)
    assert b.fits(r_max * 0.999) and not b.fits(r_max * 1.001)


@settings(max_examples=40, deadline=None)
@given(p=st.floats(0.01, 100.0), k=st.floats(0.1, 10.0), d=st.floats(1e3, 4e7))
def test_margin_is_additive_in_db(p, k, d):
    # Margin arithmetic: scaling power by k adds 10 log10 k; scaling distance by k
    # subtracts 20 log10 k (inverse-square law in the P.525 free-space loss).
    a = compute_budget(_link(tx_power_w=p, distance_m=d)).figures["margin_db"]
    b = compute_budget(_link(tx_power_w=p * k, distance_m=d)).figures["margin_db"]
    c = compute_budget(_link(tx_power_w=p, distance_m=d * k)).figures["margin_db"]
    assert b - a == pytest.approx(10 * math.log10(k), abs=1e-9)
    assert a - c == pytest.approx(20 * math.log10(k), abs=1e-9)


def test_budget_lines_carry_units_and_sources():
    b = compute_budget(_link(losses_db={"cable": 1.5, "pointing": 0.5}))
    items = {x.item: x for x in b.lines}
    for name in ("free-space path loss", "EIRP", "received power", "system noise temperature",
                 "G/T", "C/N0", "Eb/N0", "required Eb/N0", "margin", "maximum data rate"):
        assert items[name].unit and items[name].source
    assert items["loss: cable"].value == 1.5
    assert items["other losses, total"].value == pytest.approx(2.0)
    assert "ITU-R P.525" in items["free-space path loss"].source
    assert "SI 2019" in items["Boltzmann constant"].source
    # Received power chain, recomputed by hand from the lines themselves.
    assert items["received power"].value == pytest.approx(
        items["EIRP"].value - items["free-space path loss"].value - 2.0 + 10.0)
