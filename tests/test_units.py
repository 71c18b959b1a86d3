"""Units beside every printed figure, per-channel truth, and pooled figures named as pooled.

An invented pump-vibration sample: three acceleration axes in m/s² and a bearing
temperature in °C (units as written in the SI brochure, BIPM 2019).  Per-channel
figures are recomputed here with plain NumPy from the README's definitions
(SNR = 10 log10(sum x^2 / sum e^2), PRD = 100 sqrt(sum e^2 / sum x^2)).
"""

import json
import re

import numpy as np
import pytest

from codec import ChannelSpec, Profile, profile_id
from codec._profile import save_profile
from codec.cli import main

UNITS = {"ax": "m/s²", "ay": "m/s²", "az": "m/s²", "bearing": "°C"}


@pytest.fixture
def pump(tmp_path):
    rng = np.random.default_rng(11)
    t = np.arange(2048) / 1000.0  # 1 kHz
    axes = [2.0 * np.sin(2 * np.pi * 49.0 * t + k) + 0.3 * rng.normal(size=t.size)
            for k in range(3)]
    bearing = 61.0 + 0.5 * np.sin(2 * np.pi * 0.2 * t) + 0.01 * rng.normal(size=t.size)
    x = np.column_stack(axes + [bearing])
    np.save(tmp_path / "pump.npy", x)
    prof = Profile(frame_length=64, fidelity=0.99, channels=tuple(
        ChannelSpec(name=n, unit=u, resolution=0.001) for n, u in
        zip(["ch0", "ch1", "ch2", "ch3"], UNITS.values())))
    save_profile(prof, tmp_path / "pump.toml")
    return x, tmp_path


def _table(out: str) -> dict[str, list[str]]:
    lines = out.splitlines()
    head = next(i for i, ln in enumerate(lines) if ln.split()[:2] == ["channel", "unit"])
    rows = {}
    for ln in lines[head + 1:]:
        parts = ln.split()
        if not parts or not parts[0].startswith("ch"):
            break
        rows[parts[0]] = parts
    return rows


def test_unit_is_a_label_not_part_of_the_profile_id():
    a = Profile(channels=(ChannelSpec(name="t"),))
    b = Profile(channels=(ChannelSpec(name="t", unit="K"),))
    assert profile_id(a) == profile_id(b)
    with pytest.raises(ValueError):
        ChannelSpec(name="t", unit="K\n")


def test_encode_roundtrip_decode_print_units_and_per_channel_tables(pump, capsys):
    x, d = pump
    p = str(d / "pump.toml")
    assert main(["encode", str(d / "pump.npy"), "-p", p, "-o", str(d / "s.cwire"),
                 "--json", str(d / "e.json")]) == 0
    out = capsys.readouterr().out
    rows = _table(out)
    assert list(rows) == ["ch0", "ch1", "ch2", "ch3"]
    # unit column, and the max error carries the channel's unit (golden strings)
    assert [r[1] for r in rows.values()] == list(UNITS.values())
    assert all(r[-2] == u for r, u in zip(rows.values(), UNITS.values()))
    assert "pooled over 4 channels of different units" in out
    rep = json.loads((d / "e.json").read_text())
    assert rep["units"] == dict(zip(["ch0", "ch1", "ch2", "ch3"], UNITS.values()))

    assert main(["inspect", str(d / "s.cwire")]) == 0
    lines = capsys.readouterr().out.splitlines()[1:-1]
    # the quantizer step is in the channel's units (an orthonormal basis keeps them)
    for ln in lines:
        parts = ln.split()
        assert parts[7] == UNITS[{"ch0": "ax", "ch1": "ay", "ch2": "az", "ch3": "bearing"}[
            parts[3]]], ln
    assert main(["decode", str(d / "s.cwire"), "-o", str(d / "o.npy")]) == 0
    out = capsys.readouterr().out
    rows = _table(out)
    assert [r[1] for r in rows.values()] == list(UNITS.values())
    assert [r[2] for r in rows.values()] == ["2048"] * 4  # delivered
    y = np.load(d / "o.npy")
    # Per-channel SNR and max error recomputed from the decoded samples (README formulas).
    for c, (name, f) in enumerate(rep["per_channel"].items()):
        e = x[:, c] - y[:, c]
        snr = 10 * np.log10(np.sum(x[:, c] ** 2) / np.sum(e ** 2))
        assert f["snr_db"] == pytest.approx(snr, rel=1e-9), name
        assert f["max_abs_error"] == pytest.approx(np.abs(e).max(), rel=1e-9), name
        prd = 100 * np.sqrt(np.sum(e ** 2) / np.sum(x[:, c] ** 2))
        assert f["prd_percent"] == pytest.approx(prd, rel=1e-9), name
    # The pooled SNR is dominated by the 61 °C offset: far above every vibration axis.
    assert rep["snr_db"] > max(rep["per_channel"][n]["snr_db"] for n in ("ch0", "ch1", "ch2"))

    assert main(["roundtrip", str(d / "pump.npy"), "-p", p]) == 0
    out = capsys.readouterr().out
    rows = _table(out)
    assert all(r[-2] == u for r, u in zip(rows.values(), UNITS.values()))
    fid = [float(r[-1]) for r in rows.values()]
    assert min(fid) >= 0.99  # the per-frame target, checked on the decoded samples
    assert re.search(r"max abs error [0-9.e+-]+$", out.splitlines()[-2])  # mixed units: bare


def test_simulate_counts_lost_samples_end_to_end_and_prints_units(pump, capsys):
    x, d = pump
    p = str(d / "pump.toml")
    args = ["simulate", str(d / "pump.npy"), "-p", p, "--channel", "erasure", "--conceal", "none"]
    assert main(args + ["--loss-rate", "1", "--json", str(d / "all.json")]) == 0
    out = capsys.readouterr().out
    rep = json.loads((d / "all.json").read_text())
    assert rep["samples_lost"] == x.size
    # Nothing arrived and nothing was concealed: the end-to-end fidelity is 1 - sum x^2 / sum x^2.
    assert rep["fidelity_end_to_end"] == 0.0
    assert "lost samples as missing" in out
    rows = _table(out)
    assert [r[1] for r in rows.values()] == list(UNITS.values())
    assert main(args + ["--loss-rate", "0", "--json", str(d / "none.json")]) == 0
    rep = json.loads((d / "none.json").read_text())
    # Nothing lost: end to end equals the codec alone over every sample.
    assert rep["fidelity_end_to_end"] == pytest.approx(rep["fidelity_delivered"], rel=1e-12)
    assert rep["units"]["ch3"] == "°C"


def test_demo_prints_each_channel_with_its_unit(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path), "--no-compare",
                 "--scenario", "ridge_station"]) == 0
    out = capsys.readouterr().out
    rows = {ln.split()[0]: ln.split() for ln in out.splitlines()
            if ln.startswith("   ") and len(ln.split()) == 9}
    want = {"air_temp_k": "K", "rel_humidity_pct": "%", "pressure_hpa": "hPa",
            "wind_speed_m_s": "m/s", "solar_w_m2": "W/m²", "battery_v": "V"}
    for name, unit in want.items():
        assert rows[name][1] == unit and rows[name][-2] == unit, name
    # every file the demo wrote is listed
    listed = out.split("outputs in ")[1].splitlines()[0].split(": ")[1].split(", ")
    assert sorted(listed) == sorted(p.name for p in tmp_path.iterdir())
