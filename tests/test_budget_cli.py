"""``coefwire budget`` end to end: the acceptance checks of the link budget."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from realdata import MOTION_CHANNELS, MOTION_RATE_HZ, motion

from codec import Profile, encode
from codec.cli import main

HAND_LINK = """\
description = "hand-made test link"
frequency_hz = 437.0e6
distance_m = 1.0e6
tx_power_w = 2.0
tx_antenna_gain_dbi = 2.0
rx_antenna_gain_dbi = 12.0
noise_figure_db = 2.0
antenna_temperature_k = 150.0
data_rate_bps = 4800.0
modulation = "bpsk"
fec = "none"
target_ber = 1e-5
required_margin_db = 3.0

[losses_db]
cable = 2.5
pointing = 1.5
"""

ORBIT_LINK = """\
frequency_hz = 437.0e6
tx_power_w = 1.0
tx_antenna_gain_dbi = 0.0
rx_antenna_gain_dbi = 14.0
system_noise_temperature_k = 400.0
data_rate_bps = 9600.0
required_margin_db = 3.0

[orbit]
altitude_m = 550.0e3
min_elevation_deg = 10.0

[losses_db]
cable = 1.0
"""


@pytest.fixture()
def hand_link(tmp_path):
    path = tmp_path / "hand.link.toml"
    path.write_text(HAND_LINK, encoding="utf-8")
    return path


@pytest.fixture()
def orbit_link(tmp_path):
    path = tmp_path / "orbit.link.toml"
    path.write_text(ORBIT_LINK, encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def motions():
    return motion("train")[:1200]


def _csv(path, values, time=None):
    names = MOTION_CHANNELS
    cols = values if time is None else np.column_stack([time, values])
    head = names if time is None else ["time", *names]
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(",".join(head) + "\n")
        np.savetxt(fh, cols, delimiter=",", fmt="%.17g")
    return path


def test_acceptance_reproduces_hand_computed_budget(hand_link, tmp_path, capsys):
    out = tmp_path / "b.json"
    assert main(["budget", str(hand_link), "--json", str(out)]) == 0
    r = json.loads(out.read_text())
    # Independent values by hand, with rounded handbook constants (not our functions):
    # FSPL, ITU-R P.525 practical form: 32.45 + 20 log10(437) + 20 log10(1000)
    #   = 32.45 + 52.81 + 60.00 = 145.26 dB
    fspl = 32.45 + 20 * math.log10(437.0) + 20 * math.log10(1000.0)
    # EIRP = 10 log10(2 W) + 2 dBi = 3.01 + 2 = 5.01 dBW
    eirp = 10 * math.log10(2.0) + 2.0
    # T_sys = 150 K + 290 K (10^(2/10) - 1) = 150 + 169.6 = 319.6 K (IEEE noise figure)
    t_sys = 150.0 + 290.0 * (10 ** 0.2 - 1)
    # C/N0 = EIRP - FSPL - losses + G - 10 log10(T) + 228.6   (k: -228.6 dBW/K/Hz, SI 2019)
    #      = 5.01 - 145.26 - 4.0 + 12.0 - 25.05 + 228.6 = 71.30 dB-Hz
    cn0 = eirp - fspl - 4.0 + 12.0 - 10 * math.log10(t_sys) + 228.6
    # Eb/N0 = 71.30 - 10 log10(4800) = 71.30 - 36.81 = 34.49 dB
    ebn0 = cn0 - 10 * math.log10(4800.0)
    # Margin over the textbook 9.6 dB for BPSK at 1e-5 (Sklar) = 24.89 dB
    margin = ebn0 - 9.6
    assert r["fspl_db"] == pytest.approx(fspl, abs=0.1)
    assert r["eirp_dbw"] == pytest.approx(eirp, abs=0.1)
    assert r["system_noise_temperature_k"] == pytest.approx(t_sys, abs=0.5)
    assert r["cn0_dbhz"] == pytest.approx(cn0, abs=0.1)
    assert r["ebn0_db"] == pytest.approx(ebn0, abs=0.1)
    assert r["margin_db"] == pytest.approx(margin, abs=0.1)
    assert r["received_power_dbw"] == pytest.approx(eirp - fspl - 4.0 + 12.0, abs=0.1)
    assert r["required_ebn0_db"] == pytest.approx(9.6, abs=0.1)
    # R_max = 10^((C/N0 - 9.6 - 3) / 10)
    assert r["max_data_rate_bps"] == pytest.approx(10 ** ((cn0 - 9.6 - 3.0) / 10), rel=0.03)
    assert r["pass"] is None
    assert [x["item"] for x in r["budget_lines"]][:4] == [
        "frequency", "wavelength", "distance", "free-space path loss"]
    text = capsys.readouterr().out
    assert "free-space path loss" in text and "ITU-R P.525" in text
    _assert_cautions(text)


def _assert_cautions(text):
    low = text.lower()
    assert "regulated" in low and "licens" in low and "rf-exposure" in low
    assert "planning estimate" in low and "not a certification" in low


def test_orbit_budget_prints_pass_table(orbit_link, tmp_path, capsys):
    out = tmp_path / "o.json"
    assert main(["budget", str(orbit_link), "--json", str(out)]) == 0
    r = json.loads(out.read_text())
    p = r["pass"]
    assert p["table"][0]["elevation_deg"] == 10.0 and p["table"][-1]["elevation_deg"] == 90.0
    assert p["data_volume_bits"] == pytest.approx(9600.0 * p["usable_duration_s"])
    text = capsys.readouterr().out
    assert "overhead pass" in text and "per pass at 9 600 bit/s" in text
    # Human units beside the SI values of the JSON (issue: no "4.37e+08 Hz" or "1.81508e+06 m"):
    # 437e6 Hz = 437 MHz; the 10 deg slant range from 550 km is 1815.1 km; Kepler's period at
    # 550 km is 95.5 min, the overhead pass above 10 deg 7.9 min (figures of the JSON itself).
    assert "437 MHz" in text and "4.37e+08" not in text
    assert f"{r['distance_m'] / 1e3:.1f} km" in text and "1.81" not in text.split("km")[0]
    assert f"{p['orbital_period_s'] / 60:.1f} min orbit" in text
    assert f"{p['pass_duration_s'] / 60:.1f} min of a" in text
    lines = {x["item"]: x for x in r["budget_lines"]}  # the JSON stays in SI units
    assert lines["frequency"]["value"] == 437e6 and lines["frequency"]["unit"] == "Hz"
    assert lines["distance"]["unit"] == "m" and r["distance_m"] > 1e6
    _assert_cautions(text)


def test_acceptance_fidelity_rows_and_best_fidelity(orbit_link, motions, tmp_path, capsys):
    sample = _csv(tmp_path / "s.csv", motions)
    out = tmp_path / "f.json"
    fids = [0.9, 0.99, 0.9999, 1.0]
    # 60 samples/s puts the rates around what the passes of one orbit carry (rows that
    # fit, rows limited by the pass volume, one limited by the radio rate).
    assert main(["budget", str(orbit_link), "--input", str(sample), "--sample-rate-hz", "60",
                 "--fidelity", ",".join(map(str, fids)), "--json", str(out)]) == 0
    r = json.loads(out.read_text())
    rows = r["fidelity_rows"]
    p = r["pass"]
    assert [x["fidelity"] for x in rows] == fids
    assert {x["fidelity_scope"] for x in rows} == {"frame"}  # the default scope, said per row
    duration = motions.shape[0] / 60.0
    for row in rows:
        # Bits per second recomputed from the codec itself: bits_total / duration.
        bits = encode(motions, Profile(fidelity=row["fidelity"]).bind(MOTION_CHANNELS))
        assert row["bits_per_second"] == pytest.approx(bits.report["bits_total"] / duration)
        # The margin column is the margin at the radio's configured rate (9600 bit/s):
        # C/N0 - 10 log10(9600) - required Eb/N0, the same for every row.
        assert row["margin_db"] == pytest.approx(
            r["cn0_dbhz"] - 10 * math.log10(9600.0) - r["required_ebn0_db"])
        # Spare capacity: radio rate on air minus the stream's (uncoded: on air = bit/s).
        assert row["spare_on_air_bps"] == pytest.approx(9600.0 - row["bits_per_second"])
        assert row["spare_percent"] == pytest.approx(100 * row["spare_on_air_bps"] / 9600.0)
        # One orbit's bits against one overhead pass's (the best case without passes_per_day).
        per_orbit = row["bits_per_second"] * p["orbital_period_s"]
        per_pass = 9600.0 * p["usable_duration_s"]
        assert row["fits"] == (row["bits_per_second"] <= 9600.0 and per_orbit <= per_pass)
        if not row["fits"]:
            assert row["limited_by"] == ("rate" if row["bits_per_second"] > 9600 else
                                         "pass_volume")
        assert row["stream_seconds_per_pass"] == pytest.approx(
            p["data_volume_bits"] / row["bits_per_second"])
    assert any(x["fits"] for x in rows) and not all(x["fits"] for x in rows)
    assert r["best_fidelity"] == max(x["fidelity"] for x in rows if x["fits"])
    assert r["best_fidelity_reason"] is None
    text = capsys.readouterr().out
    assert f"best fidelity that fits: {r['best_fidelity']:g}" in text
    assert "frames of" in text  # frames one pass carries at the best fidelity
    assert "pass_volume" in text
    _assert_cautions(text)


def test_sample_rate_from_time_column_and_profile(hand_link, motions, tmp_path):
    t = np.arange(motions.shape[0]) / MOTION_RATE_HZ
    sample = _csv(tmp_path / "t.csv", motions, time=t)
    out = tmp_path / "t.json"
    assert main(["budget", str(hand_link), "--input", str(sample), "--fidelity", "0.95",
                 "--json", str(out)]) == 0
    r = json.loads(out.read_text())
    assert r["sample_rate_hz"] == pytest.approx(250.0)  # the record's rate (its EVT header)
    assert r["sample_rate_source"].startswith("time column")
    # A profile's channel rate wins over the time column.
    prof = tmp_path / "p.toml"
    chans = "\n".join(f'[[channels]]\nname = "{n}"\nsample_rate_hz = 50.0\n'
                      for n in MOTION_CHANNELS)
    prof.write_text(f"fidelity = 0.99\n{chans}", encoding="utf-8")
    assert main(["budget", str(hand_link), "--input", str(sample), "-p", str(prof),
                 "--fidelity", "0.95", "--json", str(out)]) == 0
    r2 = json.loads(out.read_text())
    assert r2["sample_rate_hz"] == 50.0
    assert r2["fidelity_rows"][0]["bits_per_second"] == pytest.approx(
        50.0 / 250.0 * r["fidelity_rows"][0]["bits_per_second"])


def test_unknown_sample_rate_is_a_clear_error(hand_link, motions, tmp_path, capsys):
    sample = _csv(tmp_path / "n.csv", motions)
    out = tmp_path / "n.json"
    assert main(["budget", str(hand_link), "--input", str(sample), "--json", str(out)]) == 2
    err = capsys.readouterr().err
    assert "sample rate is unknown" in err and "--sample-rate-hz" in err
    assert len(err.strip().splitlines()) == 1
    assert not out.exists()


@pytest.mark.parametrize("extra,words", [
    (["--fidelity", "0.9,abc"], ["'abc' is not a number"]),
    (["--fidelity", "1.5"], ["0 < F <= 1"]),
])
def test_bad_fidelity_list(hand_link, motions, tmp_path, capsys, extra, words):
    sample = _csv(tmp_path / "s.csv", motions)
    assert main(["budget", str(hand_link), "--input", str(sample), "--sample-rate-hz", "10",
                 *extra]) == 2
    err = capsys.readouterr().err
    for w in words:
        assert w in err


def test_stream_options_need_input(hand_link, capsys):
    assert main(["budget", str(hand_link), "--sample-rate-hz", "10"]) == 2
    assert "need --input" in capsys.readouterr().err
    assert main(["budget", str(hand_link), "--fidelity", "0.9"]) == 2
    assert "--fidelity" in capsys.readouterr().err


def test_bad_link_file_exits_2_without_output(tmp_path, capsys):
    bad = tmp_path / "bad.link.toml"
    bad.write_text(HAND_LINK.replace("data_rate_bps", "datarate_bps"), encoding="utf-8")
    out = tmp_path / "b.json"
    assert main(["budget", str(bad), "--json", str(out)]) == 2
    err = capsys.readouterr().err
    assert str(bad) in err and "datarate_bps" in err
    assert not out.exists()


def test_plot_is_written(orbit_link, motions, tmp_path):
    pytest.importorskip("matplotlib")
    sample = _csv(tmp_path / "s.csv", motions)
    png = tmp_path / "b.png"
    assert main(["budget", str(orbit_link), "--input", str(sample), "--sample-rate-hz", "10",
                 "--fidelity", "0.9,0.99", "--plot", str(png)]) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec, sec. 5.2)
    assert not list(tmp_path.glob(".*.part"))


def test_coded_link_uses_the_shipped_measured_curve(hand_link, tmp_path, capsys):
    # The Eb/N0 a coded link needs comes from the link simulator's measured curve, with
    # its provenance in the budget line; where the curve measured the target it is used.
    coded = tmp_path / "coded.link.toml"
    coded.write_text(HAND_LINK.replace('fec = "none"', 'fec = "conv"')
                     .replace("target_ber = 1e-5", "target_ber = 1e-3"), encoding="utf-8")
    out = tmp_path / "c.json"
    assert main(["budget", str(coded), "--json", str(out)]) == 0
    r = json.loads(out.read_text())
    # A K = 7 rate-1/2 convolutional code with soft Viterbi decoding needs far less than
    # uncoded BPSK's 6.8 dB at 1e-3 (Proakis 8.2: about 5 dB of coding gain at 1e-5;
    # from memory), so expect well under 6.8 dB and a rate near 1/2 on air.
    assert r["required_ebn0_db"] < 6.8 - 2.0
    assert 0.45 < r["code_rate"] <= 0.5
    assert "measured post-FEC BER curve" in r["required_ebn0_source"]
    assert r["channel_bit_rate_bps"] == pytest.approx(4800.0 / r["code_rate"])
    assert "seed" in r["required_ebn0_source"]
    capsys.readouterr()


def test_coded_target_beyond_the_curve_is_refused_not_extrapolated(tmp_path, capsys):
    coded = tmp_path / "coded.link.toml"
    coded.write_text(HAND_LINK.replace('fec = "none"', 'fec = "rs255"')
                     .replace("target_ber = 1e-5", "target_ber = 1e-9"), encoding="utf-8")
    out = tmp_path / "c.json"
    assert main(["budget", str(coded), "--json", str(out)]) == 2
    err = capsys.readouterr().err
    assert "does not extrapolate" in err and "rs255" in err
    assert len(err.strip().splitlines()) == 1 and not out.exists()
