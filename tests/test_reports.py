"""Every figure the reports give, and every budget, recomputed by the independent checker.

The checker (tests/verify.py) sees only the input file, the profile, the decoded
samples and the stream file's size; it names the published definitions it uses
(SNR from its textbook definition, PRD/PRDN from the ECG-compression literature,
the budget from the README).  It runs here over every frame layout through the
command line (encode, decode and roundtrip JSON) and over ``compare`` rows.
"""

from __future__ import annotations

import contextlib
import io
import json

import numpy as np
import pytest
from realdata import motion
from verify import (
    assert_budgets,
    budget_blocks,
    check_compare_rows,
    check_decode_report,
    check_report,
)

import codec
from codec.cli import main

NAMES = ["ax", "gy", "temp"]
# Three raw widths, so a ratio built from the wrong channel's width or from the mean
# of ratios instead of the ratio of sums shows.
RAW_BITS = [12, 16, 10]


def _samples() -> np.ndarray:
    """Two real motion channels (an accelerograph record shipped in obspy, LGPL-3.0) and a
    slow temperature whose frames partly sit within its sensor's 0.05 K resolution (the
    resolution floor).
    2000 samples: 31 full windows of 64 and a short last one; the temperature is quiet
    for the first 16 windows (one whole frame of the default 16 windows) and then moves."""
    rng = np.random.default_rng(18)
    real = motion("train")[:2000, [0, 4]]
    t = np.arange(2000)
    temp = 290.0 + np.where(t < 1024, 0.01 * rng.standard_normal(2000),
                            2.0 * np.sin(t / 40.0) + 0.02 * rng.standard_normal(2000))
    return np.column_stack([real, temp])


def _profile_toml(path, **settings) -> None:
    lines = [f"{k} = {json.dumps(v)}" for k, v in settings.items()]
    for name, raw, res in zip(NAMES, RAW_BITS, [0.0, 0.0, 0.05]):
        lines += ["", "[[channels]]", f'name = "{name}"', f"resolution = {res}",
                  f"raw_bits_per_sample = {raw}"]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def _run(argv) -> int:
    with contextlib.redirect_stdout(io.StringIO()):
        return main(argv)


LAYOUTS = [
    dict(layout_version=1),
    dict(layout_version=2),
    dict(layout_version=2, multi_channel_frames=True),
    dict(layout_version=3),
    dict(layout_version=3, multi_channel_frames=True, windows_per_frame=3),
    dict(layout_version=3, reference="total", fidelity=0.999, basis="haar"),
    dict(layout_version=4, fidelity=0.999),
    dict(layout_version=4, windows_per_frame=1, basis="legendre"),
    # window scope asked for explicitly: each window its own budget (the README's
    # "Fidelity, SNR and PRD"), on every layout whose encoder reads the setting
    dict(layout_version=1, fidelity_scope="window"),
    dict(layout_version=2, multi_channel_frames=True, fidelity_scope="window"),
    dict(layout_version=3, fidelity_scope="window"),
    dict(layout_version=4, fidelity=0.999, fidelity_scope="window"),
]


@pytest.mark.parametrize("settings", LAYOUTS, ids=lambda s: "-".join(f"{v}" for v in s.values()))
def test_encode_decode_roundtrip_json_recomputed(tmp_path, settings):
    x = _samples()
    src, prof = tmp_path / "in.csv", tmp_path / "p.toml"
    with open(src, "w", encoding="utf-8") as fh:
        fh.write(",".join(NAMES) + "\n")
        np.savetxt(fh, x, delimiter=",", fmt="%.17g")  # 17 digits: the float64 exactly
    _profile_toml(prof, **settings)
    stream, enc_json = tmp_path / "s.cwire", tmp_path / "e.json"
    out, dec_json, rt_json = tmp_path / "out.npy", tmp_path / "d.json", tmp_path / "r.json"
    assert _run(["encode", str(src), "-o", str(stream), "-p", str(prof),
                 "--json", str(enc_json)]) == 0
    assert _run(["decode", str(stream), "-o", str(out), "--json", str(dec_json)]) == 0
    assert _run(["roundtrip", str(src), "-p", str(prof), "--json", str(rt_json)]) == 0
    profile = codec.load_profile(prof)
    x_hat = np.load(out)
    size = stream.stat().st_size
    # the promise itself, on what the decoder returned from the file
    blocks = assert_budgets(x, x_hat, profile)
    if profile.reference == "ac":  # both kinds of block judged (290 K swamps the floor
        assert blocks.at_floor.any() and not blocks.at_floor.all()  # under "total")
    check_report(json.loads(enc_json.read_text()), x, x_hat, profile, size)
    check_decode_report(json.loads(dec_json.read_text()), x_hat, size, x.shape[0])
    rt = json.loads(rt_json.read_text())
    check_report(rt, x, x_hat, profile, size)  # roundtrip codes the same bytes again
    assert rt["frames_below_target"] == 0 and all(rt["per_frame"]["met"])


def test_checker_definitions_on_a_hand_example():
    # Worked by hand: x = (3, 4), x_hat = (3, 3) on one channel: error energy 1, signal
    # energy 25, mean 3.5 so AC energy 0.5.  SNR = 10 log10 25 = 13.979 dB,
    # SNR AC = 10 log10 0.5 = -3.010 dB, PRD = 100 sqrt(1/25) = 20 %, PRDN = 100 sqrt(2).
    from verify import error_figures

    f = error_figures(np.array([[3.0], [4.0]]), np.array([[3.0], [3.0]]))
    assert f["snr_db"] == pytest.approx(13.979400086720377)
    assert f["snr_ac_db"] == pytest.approx(-3.010299956639812)
    assert f["prd_percent"] == pytest.approx(20.0)
    assert f["prdn_percent"] == pytest.approx(141.4213562373095)
    assert f["max_abs_error"] == 1.0
    # budget of that window at F = 0.9, reference ac: (1 - 0.9) * 0.5 = 0.05 < error 1
    prof = codec.Profile(frame_length=2, fidelity=0.9).bind(["v"])
    b = budget_blocks(np.array([[3.0], [4.0]]), np.array([[3.0], [3.0]]), prof)
    assert b.budget.tolist() == pytest.approx([0.05]) and not b.met[0]
    assert b.fidelity.tolist() == pytest.approx([1.0 - 1.0 / 0.5])
    # with a 4-unit resolution the sensor floor N res^2 / 12 = 2 * 16 / 12 holds the window
    coarse = prof.model_copy(update={"channels": (codec.ChannelSpec(name="v", resolution=4.0),)})
    b = budget_blocks(np.array([[3.0], [4.0]]), np.array([[3.0], [3.0]]), coarse)
    assert b.budget.tolist() == pytest.approx([2 * 16 / 12]) and b.at_floor[0] and b.met[0]


def test_frame_scope_blocks_share_one_budget():
    # The frame scope (windows of one channel in one frame share max((1-F) sum E_ref,
    # sum N res^2/12)): a loud window's slack covers a quiet window's error.
    rng = np.random.default_rng(2)
    x = np.concatenate([10.0 * rng.standard_normal(8), 0.01 * rng.standard_normal(8)])[:, None]
    x_hat = x.copy()
    x_hat[8:] = 0.0  # the quiet window dropped whole: far over its own budget
    prof = codec.Profile(frame_length=8, windows_per_frame=2, fidelity=0.99).bind(["v"])
    assert not budget_blocks(x, x_hat, prof, "window").met.all()
    frame = budget_blocks(x, x_hat, prof, "frame")
    assert frame.error.size == 1 and frame.windows.tolist() == [2] and frame.met.all()


def test_compare_rows_recomputed(tmp_path):
    # compare's JSON rows, from the command, against figures recomputed from the held-out
    # samples decoded from streams coded again under each row's settings.
    x = _samples()[:768]
    src, prof = tmp_path / "in.csv", tmp_path / "p.toml"
    with open(src, "w", encoding="utf-8") as fh:
        fh.write(",".join(NAMES) + "\n")
        np.savetxt(fh, x, delimiter=",", fmt="%.17g")
    _profile_toml(prof, frame_length=32)
    out = tmp_path / "c.json"
    assert _run(["compare", str(src), "-p", str(prof), "--bases", "dct,haar",
                 "--fidelity", "0.95,0.999", "--train-fraction", "0.5",
                 "--json", str(out)]) == 0
    rows = json.loads(out.read_text())["rows"]
    profile = codec.load_profile(prof)
    test = x[384:]  # half held out, whole frames
    recon, bits = {}, {}
    for basis in ("identity", "dct", "haar"):
        for f in (0.95, 0.999):
            p = profile.model_copy(update={"basis": basis, "fidelity": f})
            enc = codec.encode(test, p)
            recon[(basis, f)] = codec.decode(enc.data, enc.profile, samples=test.shape[0]).samples
            bits[(basis, f)] = 8 * len(enc.data)
    assert {(r["basis"], r["fidelity_target"]) for r in rows} == set(recon)
    check_compare_rows(rows, test, recon, profile, bits)


def test_compare_engine_rows_recomputed():
    # The engine's own held-out samples and reconstructions, all seven bases kinds.
    x = _samples()[:1024]
    profile = codec.Profile(frame_length=64).bind(NAMES)
    cmp = codec.compare_bases(x, profile, "dct,legendre,walsh,db2", [0.9, 0.99],
                              train_fraction=0.25)
    check_compare_rows(cmp.rows, cmp.test, cmp.reconstructions, profile)
