"""The command-line contract: forms, exit codes, outputs, and one-sentence errors."""

import json
import subprocess
import sys

import numpy as np
import pytest
from checks import assert_png_is_a_picture
from realdata import MOTION_CHANNELS, motion
from verify import budget_blocks, check_report

import codec
from codec.cli import main
from codec.stream.search import locate_frames


def _csv(path, header, rows):
    path.write_text(header + "\n" + "\n".join(rows) + "\n")
    return path


@pytest.fixture
def sample_csv(tmp_path):
    rng = np.random.default_rng(0)
    t = np.arange(300) * 0.5
    x = np.c_[t, 290 + np.sin(t / 9) + 0.01 * rng.normal(size=t.size), rng.normal(size=t.size)]
    path = tmp_path / "in.csv"
    np.savetxt(path, x, delimiter=",", header="time,temp,vib", comments="", fmt="%.6f")
    return path


def test_encode_decode_inspect(sample_csv, tmp_path, capsys):
    stream, out, rep = tmp_path / "s.cwire", tmp_path / "out.csv", tmp_path / "r.json"
    assert main(["encode", str(sample_csv), "-o", str(stream), "--json", str(rep)]) == 0
    assert (tmp_path / "s.cwire.profile.toml").is_file()
    report = json.loads(rep.read_text())
    for key in ("frames", "samples", "channels", "bits_total", "bits_per_sample",
                "bits_per_frame_mean", "raw_bits_per_sample", "compression_ratio",
                "fidelity_target", "fidelity_min", "frames_below_target", "snr_db",
                "prd_percent", "max_abs_error", "per_channel"):
        assert key in report, key
    assert report["bits_total"] == 8 * stream.stat().st_size  # every bit of the stream
    assert set(report["per_channel"]) == {"temp", "vib"}
    per_frame = report["per_frame"]
    assert len(per_frame["fidelity"]) == report["frames"] and all(per_frame["met"])
    assert main(["decode", str(stream), "-o", str(out)]) == 0
    header = out.read_text().splitlines()[0]
    assert header == "time,temp,vib"
    decoded = np.loadtxt(out, delimiter=",", skiprows=1)
    original = np.loadtxt(sample_csv, delimiter=",", skiprows=1)
    assert decoded.shape == original.shape
    assert np.allclose(decoded[:, 0], original[:, 0])  # time column carried through
    capsys.readouterr()
    assert main(["inspect", str(stream)]) == 0
    lines = capsys.readouterr().out.splitlines()
    # one line per frame on the wire (a v3 frame carries several windows of a channel)
    wire = locate_frames(stream.read_bytes()).offsets.size
    assert len([ln for ln in lines if ln.rstrip().endswith(" ok")]) == wire
    assert report["frames_on_wire"] == wire


def test_roundtrip_exit_codes_and_overrides(sample_csv, tmp_path):
    rep = tmp_path / "r.json"
    assert main(["roundtrip", str(sample_csv), "--basis", "walsh", "--fidelity", "0.999",
                 "--reference", "total", "--frame-length", "32", "--json", str(rep)]) == 0
    # the figures of the report, recomputed by the independent checker (tests/verify.py)
    x = np.loadtxt(sample_csv, delimiter=",", skiprows=1)[:, 1:]
    profile = codec.Profile(basis="walsh", fidelity=0.999, reference="total",
                            frame_length=32).bind(["temp", "vib"])
    enc = codec.encode(x, profile)
    x_hat = codec.decode(enc.data, enc.profile, samples=x.shape[0]).samples
    check_report(json.loads(rep.read_text()), x, x_hat, profile, len(enc.data))


def test_roundtrip_exits_1_and_names_exactly_the_frames_that_miss(sample_csv, tmp_path,
                                                                  monkeypatch):
    # A decoder that hands back two windows spoiled by known amounts (a check that
    # fails): window 1 of 'temp' with 1.5 times its budget of error energy, window 2 of
    # 'vib' with half of its budget.  The budgets are recomputed here from the input and
    # the profile alone (tests/verify.py), never read from the encoder.
    from codec.cli import _codec_cmds

    x = np.loadtxt(sample_csv, delimiter=",", skiprows=1)[:, 1:]
    # window scope: one budget per window of each channel, so the frames named are windows
    profile = codec.Profile(fidelity_scope="window").bind(["temp", "vib"])
    budget = budget_blocks(x, x, profile).budget.reshape(-1, 2)  # (window, channel)
    n = profile.frame_length
    spoil = {(1, 0): 1.5, (2, 1): 0.5}
    real_decode = _codec_cmds.decode

    def spoiled(data, prof, samples=None, **kw):
        d = real_decode(data, prof, samples=samples, **kw)
        d.samples = d.samples.copy()
        for (w, c), k in spoil.items():
            # a constant offset d over N samples has error energy N d^2 = k * budget
            d.samples[w * n:(w + 1) * n, c] = x[w * n:(w + 1) * n, c] + np.sqrt(
                k * budget[w, c] / n)
        return d

    monkeypatch.setattr(_codec_cmds, "decode", spoiled)
    rep = tmp_path / "r.json"
    assert main(["roundtrip", str(sample_csv), "--scope", "window", "--json", str(rep)]) == 1
    report = json.loads(rep.read_text())
    assert report["frames_below_target"] == 1
    pf = report["per_frame"]
    missed = [(w, c) for w, c, m in zip(pf["window"], pf["channel"], pf["met"]) if not m]
    assert missed == [(1, 0)]
    x_hat = spoiled(codec.encode(x, profile).data, profile, samples=x.shape[0]).samples
    blocks = check_report(report, x, x_hat, profile, len(codec.encode(x, profile).data))
    assert blocks.fidelity[1 * 2 + 0] < 0.99 < blocks.fidelity[2 * 2 + 1]


def test_roundtrip_on_real_data_every_basis(tmp_path):
    # Acceptance: real multi-channel sensor data (a six-channel accelerograph record
    # shipped in obspy, LGPL-3.0), F=0.99, ac.
    path = tmp_path / "motions.csv"
    np.savetxt(path, motion(), delimiter=",", header=",".join(MOTION_CHANNELS),
               comments="", fmt="%.6f")
    for basis in ("identity", "dct", "legendre", "haar", "walsh"):
        rep = tmp_path / f"{basis}.json"
        code = main(["roundtrip", str(path), "--fidelity", "0.99", "--reference", "ac",
                     "--basis", basis, "--json", str(rep)])
        assert code == 0
        # recomputed from the input and the decoded samples by the independent checker
        profile = codec.Profile(basis=basis, fidelity=0.99).bind(MOTION_CHANNELS)
        x = np.loadtxt(path, delimiter=",", skiprows=1)
        enc = codec.encode(x, profile)
        x_hat = codec.decode(enc.data, enc.profile, samples=x.shape[0]).samples
        blocks = check_report(json.loads(rep.read_text()), x, x_hat, profile, len(enc.data))
        assert blocks.met.all()


BAD_CSV = [
    ("a,b\n1,2\n3,x\n", "line 3, column 'b': 'x' is not a number"),
    ("a,b\n1,2\n3\n", "line 3 has 1 columns but the header has 2"),
    ("a,b\n1,2\n3,nan\n", "line 3, column 'b': value is nan"),
    ("a,b\n1,inf\n", "line 2, column 'b': value is inf"),
    ("", "empty"),
    ("a,b\n", "no data rows"),
]


@pytest.mark.parametrize(("text", "message"), BAD_CSV)
def test_bad_csv_exit_2_no_output(tmp_path, capsys, text, message):
    src = tmp_path / "bad.csv"
    src.write_text(text)
    out = tmp_path / "s.cwire"
    assert main(["encode", str(src), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err
    assert not out.exists() and not (tmp_path / "s.cwire.profile.toml").exists()
    assert list(tmp_path.iterdir()) == [src]  # no temporary file left behind either


def test_profile_channel_mismatch(sample_csv, tmp_path, capsys):
    prof = tmp_path / "p.toml"
    prof.write_text('[[channels]]\nname = "temp"\n\n[[channels]]\nname = "other"\n')
    assert main(["encode", str(sample_csv), "-o", str(tmp_path / "s"), "-p", str(prof)]) == 2
    assert "do not match the input's columns" in capsys.readouterr().err


@pytest.mark.parametrize(("toml", "message"), [
    ("frame_len = 64\n", "unknown key 'frame_len'"),
    ("fidelity = 1.5\n", "key 'fidelity'"),
    ('basis = "fourier"\n', "unknown basis 'fourier'"),
    ("frame_length = 1\n", "key 'frame_length'"),
    ('[[channels]]\nname = "a"\nresolution = -1\n', "key 'channels.0.resolution'"),
])
def test_bad_profile_names_file_and_key(sample_csv, tmp_path, capsys, toml, message):
    prof = tmp_path / "p.toml"
    prof.write_text(toml)
    assert main(["roundtrip", str(sample_csv), "-p", str(prof)]) == 2
    err = capsys.readouterr().err
    assert message in err and str(prof) in err


def test_stream_not_ours(tmp_path, capsys):
    junk = tmp_path / "junk.bin"
    junk.write_bytes(bytes(range(256)) * 4)
    prof = tmp_path / "p.toml"
    prof.write_text('[[channels]]\nname = "a"\n')
    out = tmp_path / "o.csv"
    assert main(["decode", str(junk), "-o", str(out), "-p", str(prof)]) == 2
    assert "no frame" in capsys.readouterr().err and not out.exists()
    assert main(["decode", str(junk), "-o", str(out)]) == 2  # and no recorded profile
    assert "pass -p PROFILE" in capsys.readouterr().err


def test_unknown_basis_and_bad_frame_length(sample_csv, capsys):
    assert main(["roundtrip", str(sample_csv), "--basis", "fourier"]) == 2
    assert "unknown basis 'fourier'" in capsys.readouterr().err
    assert main(["roundtrip", str(sample_csv), "--basis", "walsh", "--frame-length", "48"]) == 2
    assert "power of two" in capsys.readouterr().err


def test_npy_input_and_output(tmp_path):
    x = np.random.default_rng(1).normal(size=(200, 3))
    np.save(tmp_path / "x.npy", x)
    assert main(["encode", str(tmp_path / "x.npy"), "-o", str(tmp_path / "s")]) == 0
    assert main(["decode", str(tmp_path / "s"), "-o", str(tmp_path / "y.npy")]) == 0
    assert np.load(tmp_path / "y.npy").shape == x.shape
    np.save(tmp_path / "bad.npy", np.array([[1.0, np.nan]]))
    assert main(["encode", str(tmp_path / "bad.npy"), "-o", str(tmp_path / "t")]) == 2


def test_console_script_error_has_no_traceback(tmp_path):
    # The real entry point in a subprocess: one sentence on stderr, exit 2.
    src = tmp_path / "bad.csv"
    src.write_text("a\n1\nfoo\n")
    proc = subprocess.run([sys.executable, "-m", "codec.cli", "encode", str(src), "-o",
                           str(tmp_path / "s")], capture_output=True, text=True)
    assert proc.returncode == 2
    assert proc.stderr.strip().count("\n") == 0 and "Traceback" not in proc.stderr


def test_demo_runs(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path), "--no-compare"]) == 0
    out = capsys.readouterr().out
    assert "ridge_station" in out and "orbiter_hk" in out and "caution" in out
    assert (tmp_path / "orbiter_hk.decoded.csv").is_file()
    assert main(["demo", "--out", str(tmp_path), "--scenario", "orbiter_hk"]) == 0
    assert "bases compared" in capsys.readouterr().out
    assert_png_is_a_picture(tmp_path / "orbiter_hk.compare.png")



def test_packed_profiles_match_profiles_folder():
    # The installed demo reads codec/data; the repository's profiles/ must say the same.
    from pathlib import Path

    root = Path(__file__).resolve().parent.parent
    for name in ("ridge_station", "orbiter_hk"):
        assert (root / "profiles" / f"{name}.toml").read_text() == \
            (root / "codec" / "data" / f"{name}.toml").read_text()
