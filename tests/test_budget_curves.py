"""Required Eb/N0 of a coded link, read from a measured BER curve file.

The curves here are written by the test from the closed-form BPSK BER
(Proakis 4.3), shifted by a known coding gain, so the interpolated answer can be
checked against the exact inverse of the same closed form.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.optimize import brentq
from scipy.special import erfc

from codec import ProfileError
from link_sim._budget import compute_budget, required_ebn0
from link_sim._linkfile import link_from_dict

GAIN_DB = 2.0   # the invented code's coding gain over uncoded BPSK
BITS = 10**9    # bits per point of the invented measurement


def _ber(ebn0_db):
    # Closed-form BPSK, Q(sqrt(2 Eb/N0)) = erfc(sqrt(Eb/N0)) / 2 (Proakis 4.3), shifted.
    return 0.5 * erfc(np.sqrt(10 ** ((np.asarray(ebn0_db) + GAIN_DB) / 10)))


def _write_curves(path, grid, rate_on_air=0.8, errors=None):
    ber = _ber(grid)
    errs = np.round(ber * BITS) if errors is None else np.asarray(errors)
    doc = {
        "what": "test curve",
        "provenance": {"command": "test", "seed": 1, "bits_info_per_point": BITS,
                       "min_errors_for_interpolation": 10},
        "curves": {"rs255": {"modulation": "bpsk", "rate_on_air": rate_on_air,
                             "bits_info_per_point": BITS, "ebn0_db": list(map(float, grid)),
                             "ber_post_fec": ber.tolist(), "errors_post_fec": errs.tolist(),
                             "below_floor_at_db": None}},
    }
    path.write_text(json.dumps(doc), encoding="utf-8")
    return path


@pytest.mark.parametrize("target", [1e-3, 1e-5, 1e-6])
def test_log_ber_interpolation_matches_the_exact_inverse(tmp_path, target):
    path = _write_curves(tmp_path / "c.json", np.arange(0.0, 12.01, 0.5))
    got = required_ebn0("bpsk", "rs255", target, curves_path=path)
    exact = brentq(lambda x: math.log10(float(_ber(x))) - math.log10(target), -5, 20)
    # Linear in log10(BER) over 0.5 dB steps of a smooth curve: well inside 0.05 dB.
    assert got.ebn0_db == pytest.approx(exact, abs=0.05)
    assert got.code_rate == 0.8
    assert "measured post-FEC BER curve" in got.source and "command test" in got.source


def test_qpsk_uses_the_bpsk_curve(tmp_path):
    # Gray QPSK has the per-bit BER of BPSK over AWGN (Proakis 4.3).
    path = _write_curves(tmp_path / "c.json", np.arange(0.0, 12.01, 0.5))
    a = required_ebn0("bpsk", "rs255", 1e-5, curves_path=path)
    b = required_ebn0("qpsk", "rs255", 1e-5, curves_path=path)
    assert a.ebn0_db == b.ebn0_db and "QPSK" in b.source


def test_target_below_the_measured_floor_is_refused(tmp_path):
    # Only 1e6 bits per point: BER below ~1e-5 saw fewer than 10 errors, so 1e-7 is not
    # measured and must not be extrapolated.
    grid = np.arange(0.0, 12.01, 0.5)
    path = _write_curves(tmp_path / "c.json", grid, errors=np.round(_ber(grid) * 1e6))
    with pytest.raises(ProfileError, match="does not extrapolate"):
        required_ebn0("bpsk", "rs255", 1e-7, curves_path=path)
    # A target the curve does measure still works.
    assert required_ebn0("bpsk", "rs255", 1e-3, curves_path=path).ebn0_db > 0


def test_zero_error_point_gives_a_conservative_requirement(tmp_path):
    # Measured to BER ~1e-4 with >= 10 errors at 4 dB, then no error at all in 4e6 bits at
    # 4.5 dB.  The one-sided 95 % upper bound for zero events in n trials is 3/n (the "rule of
    # three", Hanley & Lippman-Hand, JAMA 249, 1983): 7.5e-7 here.  A target of 1e-5 is
    # therefore met at 4.5 dB, a conservative answer; a target of 1e-7 (< 7.5e-7) is not known.
    doc = {"provenance": {"command": "test", "bits_info_per_point": 4_000_000,
                          "min_errors_for_interpolation": 10},
           "curves": {"rs255": {"modulation": "bpsk", "rate_on_air": 0.8,
                                "bits_info_per_point": 4_000_000,
                                "ebn0_db": [3.0, 3.5, 4.0, 4.5],
                                "ber_post_fec": [1e-2, 1e-3, 1e-4, 0.0],
                                "errors_post_fec": [40000, 4000, 400, 0],
                                "below_floor_at_db": 4.5}}}
    path = tmp_path / "c.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    got = required_ebn0("bpsk", "rs255", 1e-5, curves_path=path)
    assert got.ebn0_db == 4.5 and "rule of three" in got.source
    with pytest.raises(ProfileError, match="does not extrapolate"):
        required_ebn0("bpsk", "rs255", 1e-7, curves_path=path)


def test_missing_fec_entry_and_unreadable_file(tmp_path):
    path = _write_curves(tmp_path / "c.json", np.arange(0.0, 12.01, 0.5))
    with pytest.raises(ProfileError, match="no entry for fec = 'conv'"):
        required_ebn0("bpsk", "conv", 1e-5, curves_path=path)
    bad = tmp_path / "bad.json"
    bad.write_text("{not json", encoding="utf-8")
    with pytest.raises(ProfileError, match="cannot be read"):
        required_ebn0("bpsk", "rs255", 1e-5, curves_path=bad)


def test_coded_budget_charges_the_rate_on_air(tmp_path):
    path = _write_curves(tmp_path / "c.json", np.arange(0.0, 12.01, 0.5), rate_on_air=0.8)
    base = dict(frequency_hz=437e6, distance_m=1.0e6, tx_power_w=1.0, tx_antenna_gain_dbi=0.0,
                rx_antenna_gain_dbi=10.0, system_noise_temperature_k=500.0,
                data_rate_bps=9600.0, target_ber=1e-5)
    coded = compute_budget(link_from_dict({**base, "fec": "rs255"}), curves_path=path).figures
    plain = compute_budget(link_from_dict(base)).figures
    # Same C/N0 and Eb/N0 per information bit; the coded link needs about GAIN_DB less.
    assert coded["ebn0_db"] == pytest.approx(plain["ebn0_db"])
    assert plain["required_ebn0_db"] - coded["required_ebn0_db"] == pytest.approx(GAIN_DB,
                                                                                 abs=0.05)
    assert coded["channel_bit_rate_bps"] == pytest.approx(9600.0 / 0.8)
