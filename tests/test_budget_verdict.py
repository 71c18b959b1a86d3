"""The budget's verdict: a stream fits only when the radio's configured rate carries it.

Checks against the arithmetic of the conditions themselves (bits on air per
second against the radio's rate on air; margin at the radio's rate; one orbit's
bits against the passes of one orbit) and an end-to-end acceptance run on an
invented pump-vibration monitor with a 433 MHz radio at 32 000 bit/s.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from codec import Profile, ProfileError, encode
from codec.cli import main
from link_sim._budget import compute_budget, judge_stream, pass_summary
from link_sim._linkfile import link_from_dict


def _link(**changes):
    base = dict(frequency_hz=433.92e6, distance_m=800.0, tx_power_w=0.01,
                tx_antenna_gain_dbi=0.0, rx_antenna_gain_dbi=2.15,
                system_noise_temperature_k=600.0, data_rate_bps=32_000.0, modulation="bpsk",
                fec="none", target_ber=1e-5, required_margin_db=10.0,
                losses_db={"walls_and_machinery": 20.0})
    base.update(changes)
    return link_from_dict(base)


def test_stream_faster_than_the_radio_does_not_fit_whatever_the_power():
    b = compute_budget(_link())
    assert b.figures["fits"]  # the radio's own rate keeps the margin ...
    v = judge_stream(b, 38_887.0)  # ... but a stream of more bits than the radio sends
    assert not v.fits and v.limited_by == "rate" and v.failed == ("rate",)
    assert v.spare_on_air_bps == pytest.approx(32_000.0 - 38_887.0)
    assert v.spare_percent == pytest.approx(100 * (32_000.0 - 38_887.0) / 32_000.0)
    # The old verdict recomputed the margin at the stream's own rate; the margin is now the
    # one at the radio's configured rate: C/N0 - 10 log10(32 000) - required Eb/N0.
    assert v.margin_db == pytest.approx(b.cn0_dbhz - 10 * math.log10(32_000.0)
                                        - b.required.ebn0_db)
    # Raising the power a thousandfold (+30 dB) adds margin but not bits per second.
    loud = compute_budget(_link(tx_power_w=10.0))
    v2 = judge_stream(loud, 38_887.0)
    assert v2.margin_db == pytest.approx(v.margin_db + 30.0)
    assert not v2.fits and v2.limited_by == "rate"
    # A stream just below the radio's rate fits.
    assert judge_stream(b, 31_999.0).fits


def test_margin_at_the_radios_rate_limits_even_a_slow_stream():
    # A 0.2 bit/s stream does not gain 50 dB of margin when the radio runs at 32 000 bit/s.
    weak = compute_budget(_link(tx_power_w=1e-6, distance_m=20e3))
    assert weak.figures["margin_db"] < 10.0
    v = judge_stream(weak, 0.2)
    assert not v.fits and v.limited_by == "margin"
    assert v.margin_db == pytest.approx(weak.figures["margin_db"])
    both = judge_stream(weak, 40_000.0)
    assert both.failed == ("rate", "margin") and both.limited_by == "rate"


def test_on_air_rate_counts_fec_and_packet_overhead():
    # On air = codec bits / code rate + frames x packet overhead (bits the radio adds).
    b = compute_budget(_link(fec="conv", target_ber=1e-3, packet_overhead_bits=64.0))
    code = b.figures["code_rate"]
    assert 0.45 < code <= 0.5  # K = 7 rate 1/2 code with sync and tail (measured curve)
    v = judge_stream(b, 10_000.0, frames_per_second=20.0)
    assert v.on_air_bps == pytest.approx(10_000.0 / code + 20.0 * 64.0)
    assert v.radio_on_air_bps == pytest.approx(32_000.0 / code)
    assert v.fits == (v.on_air_bps <= v.radio_on_air_bps)
    # Enough frames per second make the overhead alone exceed the radio.
    assert judge_stream(b, 10_000.0, frames_per_second=1000.0).limited_by == "rate"


def _orbit_link(**orbit):
    spec = dict(altitude_m=550e3, min_elevation_deg=10.0) | orbit
    return link_from_dict(dict(frequency_hz=437e6, orbit=spec, tx_power_w=1.0,
                               tx_antenna_gain_dbi=0.0, rx_antenna_gain_dbi=14.0,
                               system_noise_temperature_k=400.0, data_rate_bps=9600.0,
                               required_margin_db=3.0))


def test_orbit_pass_volume_condition():
    b = compute_budget(_orbit_link())
    p = pass_summary(b)
    # Without passes_per_day: one overhead pass per orbit, the best case.
    assert p["passes_per_orbit"] == pytest.approx(1.0)
    assert "best case" in p["passes_per_day_source"] and "overhead" in p["best_case_note"]
    per_pass = 9600.0 * p["usable_duration_s"]
    limit = per_pass / p["orbital_period_s"]  # the stream rate whose orbit fills one pass
    assert p["pass_averaged_rate_bps"] == pytest.approx(limit)
    assert judge_stream(b, 0.99 * limit).fits
    v = judge_stream(b, 1.01 * limit)
    assert not v.fits and v.limited_by == "pass_volume"
    assert v.orbit_bits_on_air == pytest.approx(1.01 * limit * p["orbital_period_s"])
    assert v.pass_bits_on_air == pytest.approx(per_pass)
    # With the station's known passes a day: a day's bits against that many passes.
    b4 = compute_budget(_orbit_link(passes_per_day=4.0))
    p4 = pass_summary(b4)
    day_limit = 4.0 * per_pass / 86_400.0
    assert p4["pass_averaged_rate_bps"] == pytest.approx(day_limit)
    assert p4["passes_per_day_source"] == "link file"
    assert judge_stream(b4, 0.99 * day_limit).fits
    assert judge_stream(b4, 1.01 * day_limit).limited_by == "pass_volume"


def test_more_passes_a_day_than_revolutions_is_refused():
    # 550 km: period 95.5 min, 15.1 revolutions a day (Kepler's third law).
    with pytest.raises(ProfileError, match="passes_per_day"):
        _orbit_link(passes_per_day=17.0)
    assert _orbit_link(passes_per_day=15.0).orbit.passes_per_day == 15.0


# An invented scenario: a pump-vibration monitor (three acceleration axes and a bearing
# temperature, 2500 samples/s) on a 433 MHz link inside a plant; the radio runs at
# 32 000 bit/s.  Illustrative planning figures only.
PUMP_LINK = """\
description = "pump-vibration monitor to plant gateway, 433 MHz, 800 m"
frequency_hz = 433.92e6
distance_m = 800.0
tx_power_w = 0.01
tx_antenna_gain_dbi = 0.0
rx_antenna_gain_dbi = 2.15
system_noise_temperature_k = 600.0
data_rate_bps = 32000.0
modulation = "bpsk"
fec = "none"
target_ber = 1e-5
required_margin_db = 10.0

[losses_db]
walls_and_machinery = 20.0
"""

PUMP_PROFILE = "fidelity = 0.99\n" + "".join(
    f'[[channels]]\nname = "{n}"\nsample_rate_hz = 2500.0\n'
    for n in ("acc_x", "acc_y", "acc_z", "bearing_temp"))


def pump_sample(n: int = 5000, fs: float = 2500.0, seed: int = 7) -> np.ndarray:
    """Invented pump vibration: shaft 24.5 Hz, its second harmonic, 7-vane pass, noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / fs
    shaft = 24.5
    axes = [0.8 * np.sin(2 * np.pi * shaft * t + k) + 0.3 * np.sin(4 * np.pi * shaft * t + 2 * k)
            + 0.15 * np.sin(2 * np.pi * 7 * shaft * t) + 0.05 * rng.standard_normal(n)
            for k in range(3)]
    temp = 318.0 + 0.002 * t + 0.01 * rng.standard_normal(n)
    return np.column_stack([*axes, temp])


def test_acceptance_pump_monitor(tmp_path, capsys):
    link = tmp_path / "pump.link.toml"
    link.write_text(PUMP_LINK, encoding="utf-8")
    prof = tmp_path / "pump.toml"
    prof.write_text(PUMP_PROFILE, encoding="utf-8")
    x = pump_sample()
    sample = tmp_path / "pump.csv"
    np.savetxt(sample, x, delimiter=",", header="acc_x,acc_y,acc_z,bearing_temp",
               comments="", fmt="%.17g")
    out = tmp_path / "pump.json"
    assert main(["budget", str(link), "--input", str(sample), "-p", str(prof),
                 "--fidelity", "0.9,0.99,0.999", "--json", str(out)]) == 0
    r = json.loads(out.read_text())
    rows = {row["fidelity"]: row for row in r["fidelity_rows"]}
    # The F = 0.999 stream needs more than the radio: its own bits over the sample's 2 s.
    names = ["acc_x", "acc_y", "acc_z", "bearing_temp"]
    need = encode(x, Profile(fidelity=0.999).bind(names)).report["bits_total"] / 2.0
    assert rows[0.999]["bits_per_second"] == pytest.approx(need) and need > 32_000.0
    assert rows[0.999]["fits"] is False and rows[0.999]["limited_by"] == "rate"
    assert r["margin_db"] >= 10.0  # the link itself keeps its margin at 32 000 bit/s
    best = r["best_fidelity"]
    assert best is not None and best < 0.999 and rows[best]["fits"]
    assert rows[best]["bits_per_second"] <= 32_000.0 and rows[best]["limited_by"] is None
    text = capsys.readouterr().out
    assert "433.92 MHz" in text and "  800 m  " in text and "32 000 bit/s" in text
    assert f"best fidelity that fits: {best:g}" in text


def test_no_fidelity_fits_names_the_reason(tmp_path, capsys):
    link = tmp_path / "slow.link.toml"
    link.write_text(PUMP_LINK.replace("data_rate_bps = 32000.0", "data_rate_bps = 4800.0"),
                    encoding="utf-8")
    prof = tmp_path / "pump.toml"
    prof.write_text(PUMP_PROFILE, encoding="utf-8")
    sample = tmp_path / "pump.csv"
    np.savetxt(sample, pump_sample(), delimiter=",", header="acc_x,acc_y,acc_z,bearing_temp",
               comments="")
    out = tmp_path / "slow.json"
    assert main(["budget", str(link), "--input", str(sample), "-p", str(prof),
                 "--fidelity", "0.9,0.99", "--json", str(out)]) == 0
    r = json.loads(out.read_text())
    assert r["best_fidelity"] is None
    assert all(row["limited_by"] == "rate" for row in r["fidelity_rows"])
    assert "more than the radio" in r["best_fidelity_reason"]
    assert "no fidelity in the list fits" in capsys.readouterr().out
