"""Units beside every printed figure, per-channel truth, and pooled figures named as pooled.

An invented pump-vibration sample: three acceleration axes in m/s² and a bearing
temperature in °C (units as written in the SI brochure, BIPM 2019).  Per-channel
figures are recomputed here with plain NumPy from the README's definitions
(SNR = 10 log10(sum x^2 / sum e^2), PRD = 100 sqrt(sum e^2 / sum x^2)).
"""

import contextlib
import io
import json
import re

import numpy as np
import pytest
from streams import receive_over_loopback

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
    # single-channel frames: inspect then lists each channel's step in its own unit
    assert main(["encode", str(d / "pump.npy"), "-p", p, "-o", str(d / "s.cwire"),
                 "--json", str(d / "e.json"), "--frames", "single"]) == 0
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


def _rows_after(out: str, head_start: list[str]) -> list[list[str]]:
    """Rows of the table whose header line starts with ``head_start`` (up to a blank line)."""
    lines = out.splitlines()
    head = next(i for i, ln in enumerate(lines) if ln.split()[:len(head_start)] == head_start)
    rows = []
    for ln in lines[head + 1:]:
        if not ln.strip() or ln.startswith(("(", "pooled")):
            break
        rows.append(ln.split())
    return rows


def test_compare_prints_errors_in_channel_units_and_labels_pooled_rows(pump, capsys):
    x, d = pump
    out_json = d / "c.json"
    assert main(["compare", str(d / "pump.npy"), "-p", str(d / "pump.toml"), "--bases", "dct",
                 "--fidelity", "0.99", "--json", str(out_json)]) == 0
    out = capsys.readouterr().out
    # pooled rows: labelled pooled; their max error mixes m/s² and °C, so it stays bare
    assert "pooled over 4 channels of different units" in out
    pooled = _rows_after(out, ["basis", "F"])
    assert {r[0] for r in pooled} == {"identity", "dct"}
    assert all(re.fullmatch(r"[0-9.e+-]+", r[11]) for r in pooled), pooled
    # per-channel rows: a unit column, and the max error followed by the channel's unit
    rows = _rows_after(out, ["F", "channel", "unit"])
    assert [r[1] for r in rows] == ["ch0", "ch1", "ch2", "ch3"]
    assert [r[2] for r in rows] == list(UNITS.values())
    assert [r[-1] for r in rows] == list(UNITS.values())
    rep = json.loads(out_json.read_text())
    assert rep["units"] == dict(zip(["ch0", "ch1", "ch2", "ch3"], UNITS.values()))
    # the printed error is the JSON row's (SI number as measured), to the 4 printed digits
    want = {r["channel"]: r["max_abs_error"] for r in rep["rows"]
            if r["winner"] and r["channel"] != "all"}
    for r in rows:
        assert float(r[-2]) == pytest.approx(want[r[1]], rel=5e-4), r


def test_compare_pooled_error_carries_the_unit_all_channels_share(tmp_path, capsys):
    rng = np.random.default_rng(12)
    x = np.cumsum(rng.normal(size=(1024, 2)), axis=0)
    np.save(tmp_path / "v.npy", x)
    save_profile(Profile(frame_length=32, channels=(ChannelSpec(name="ch0", unit="m/s²"),
                                                    ChannelSpec(name="ch1", unit="m/s²"))),
                 tmp_path / "v.toml")
    assert main(["compare", str(tmp_path / "v.npy"), "-p", str(tmp_path / "v.toml"),
                 "--bases", "dct", "--fidelity", "0.95"]) == 0
    out = capsys.readouterr().out
    assert "pooled over 2 channels, all in m/s²:" in out
    assert all(r[12] == "m/s²" for r in _rows_after(out, ["basis", "F"]))


def test_train_prints_errors_in_channel_units_recomputed_from_the_basis_file(pump, capsys):
    x, d = pump
    basis = d / "k.cwbasis.npz"
    assert main(["train", str(d / "pump.npy"), "-o", str(basis), "--frame-length", "16",
                 "-p", str(d / "pump.toml")]) == 0
    out = capsys.readouterr().out
    keep = int(re.search(r"the first (\d+) others", out).group(1))
    rows = _rows_after(out, ["channel", "unit", "frames"])
    assert [r[0] for r in rows] == ["ch0", "ch1", "ch2", "ch3"]
    assert [r[1] for r in rows] == list(UNITS.values())
    assert [r[4] for r in rows] == list(UNITS.values())  # rms about the mean
    assert [r[6] for r in rows] == list(UNITS.values())  # rms error
    assert "pooled over 4 channels of different units" in out
    # Recomputed with plain NumPy from the matrix in the file: project each channel's
    # frames on the constant row and the next `keep` rows, rms of what is left.
    m = np.load(basis)["matrix"][: keep + 1]
    for c, r in enumerate(rows):
        frames = x[: x.shape[0] // 16 * 16, c].reshape(-1, 16)
        resid = frames - (frames @ m.T) @ m
        assert float(r[5]) == pytest.approx(np.sqrt(np.mean(resid ** 2)), rel=5e-4), r
        ac = frames - frames.mean(axis=1, keepdims=True)
        assert float(r[3]) == pytest.approx(np.sqrt(np.mean(ac ** 2)), rel=5e-4), r
    # a profile that lacks a trained column is refused in one sentence, exit 2
    save_profile(Profile(channels=(ChannelSpec(name="other"),)), d / "other.toml")
    capsys.readouterr()
    assert main(["train", str(d / "pump.npy"), "-o", str(d / "y.cwbasis.npz"),
                 "-p", str(d / "other.toml"), "--frame-length", "16"]) == 2
    assert "no channel named ch0" in capsys.readouterr().err
    assert not (d / "y.cwbasis.npz").exists()


def test_receive_prints_counts_and_ranges_in_channel_units(pump, tmp_path):
    # 'receive' in its own process on port 0 says which port it bound (on stderr), then
    # 'send' moves the stream over loopback UDP; its summary and JSON are checked.
    x, d = pump
    stream = d / "s.cwire"
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["encode", str(d / "pump.npy"), "-p", str(d / "pump.toml"),
                     "-o", str(stream)]) == 0
    out = receive_over_loopback(stream, d / "rx.csv", ("--json", str(d / "rx.json")))
    assert "counted over all 4 channels: 8192 delivered, 0 lost" in out
    rows = _rows_after(out, ["channel", "unit", "delivered"])
    assert [r[1] for r in rows] == list(UNITS.values())
    assert [r[2] for r in rows] == ["2048"] * 4
    assert [r[6] for r in rows] == list(UNITS.values())  # delivered min, with its unit
    assert [r[8] for r in rows] == list(UNITS.values())  # delivered max, with its unit
    rep = json.loads((d / "rx.json").read_text())
    assert rep["units"] == dict(zip(["ch0", "ch1", "ch2", "ch3"], UNITS.values()))
    # the range is that of the samples written (what the batch decoder gives, too)
    got = np.loadtxt(d / "rx.csv", delimiter=",", skiprows=1)
    for c, (name, f) in enumerate(rep["per_channel"].items()):
        assert f["samples_delivered"] == x.shape[0]
        assert f["delivered_min"] == pytest.approx(got[:, c].min(), abs=1e-3)
        assert f["delivered_max"] == pytest.approx(got[:, c].max(), abs=1e-3)
        # and within the profile's resolution-bounded coding error of the sent samples
        assert f["delivered_max"] == pytest.approx(x[:, c].max(), abs=1.0), name


def test_inspect_gives_a_multi_channel_frames_step_a_unit_only_when_its_channels_share_one(
        pump, capsys):
    x, d = pump
    np.save(d / "two.npy", x[:, [0, 3]])
    for k, (units, want) in enumerate(((["m/s2", "degC"], None), (["m/s2", "m/s2"], "m/s2"))):
        prof = Profile(frame_length=64, channels=tuple(
            ChannelSpec(name=n, unit=u) for n, u in zip(["ch0", "ch1"], units)))
        save_profile(prof, d / f"two{k}.toml")
        assert main(["encode", str(d / "two.npy"), "-p", str(d / f"two{k}.toml"),
                     "-o", str(d / f"two{k}.cwire")]) == 0
        capsys.readouterr()
        assert main(["inspect", str(d / f"two{k}.cwire")]) == 0
        rows = capsys.readouterr().out.splitlines()[1:-1]
        assert rows and all(r.split()[3] == "ch0,ch1" for r in rows)  # the default: multi
        # byte kind seq channels basis terms step [unit] bits status
        assert all((r.split()[7] == want) if want else r.split()[7].isdigit() for r in rows)
