"""Budget scope: one budget per window, or one shared by the windows of a frame."""

import json

import numpy as np
import pytest
from checks import assert_meets_target
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import codec
from codec.cli import main


def _bursty(rng, samples: int, channels: int, n: int) -> np.ndarray:
    """Windows that are loud, quiet or silent at random: the case frame scope is for."""
    w = -(-samples // n)
    level = rng.choice([0.0, 1e-4, 1e-2, 1.0, 30.0], size=(w, channels))
    gain = np.repeat(level, n, axis=0)[:samples]
    x = np.cumsum(rng.normal(size=(samples, channels)), axis=0) * 0.3 + rng.normal(
        size=(samples, channels))
    return x * gain + rng.uniform(-50, 50, channels) * (rng.random() < 0.5)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(1, 700), st.integers(1, 3), st.sampled_from([8, 16, 32, 64]),
       st.integers(1, 16), st.sampled_from([0.5, 0.9, 0.99, 0.999]),
       st.sampled_from(["total", "ac"]), st.sampled_from([3, 4]), st.booleans(),
       st.sampled_from([0.0, 1e-3]), st.integers(0, 2**32 - 1))
def test_every_frame_meets_its_shared_budget_on_the_decoded_samples(
        samples, channels, n, wpf, f, ref, layout, multi, res, seed):
    rng = np.random.default_rng(seed)
    x = _bursty(rng, samples, channels, n)
    prof = codec.Profile(frame_length=n, windows_per_frame=wpf, fidelity=f, reference=ref,
                         layout_version=layout, multi_channel_frames=multi,
                         fidelity_scope="frame",
                         channels=tuple(codec.ChannelSpec(name=f"c{i}", resolution=res)
                                        for i in range(channels)))
    enc = codec.encode(x, prof)
    dec = codec.decode(enc.data, enc.profile, samples=samples)
    assert np.array_equal(dec.samples, enc.reconstruction)
    # the budget of every (channel, frame) block recomputed from the input alone
    assert_meets_target(x, dec.samples, enc.profile)
    assert enc.report["fidelity_scope"] == "frame"
    assert enc.report["blocks_below_target"] == 0


def test_stream_encoder_codes_whole_frames_in_frame_scope():
    # a live stream fed in odd blocks gives the bytes of the whole-input encoder
    rng = np.random.default_rng(3)
    x = _bursty(rng, 3000, 2, 64)
    prof = codec.Profile(fidelity_scope="frame")
    se = codec.StreamEncoder(prof, 2)
    data = b"".join(se.feed(x[a:a + 333]) for a in range(0, 3000, 333)) + se.close()
    assert data == codec.encode(x, se.profile).data


def _loud_and_silent(n=64, frames=40, seed=0):
    """Frames of one loud window (a tone in noise) and seven near-silent ones."""
    rng = np.random.default_rng(seed)
    w = np.arange(frames * 8)
    gain = np.where(w % 8 == 0, 1.0, 1e-3)
    t = np.arange(frames * 8 * n)
    x = np.sin(2 * np.pi * t / 23.0) + 0.3 * rng.normal(size=t.size)
    return (x * np.repeat(gain, n))[:, None]


def test_one_loud_seven_silent_costs_fewer_bits_in_frame_scope():
    # The reason for frame scope: a per-window budget codes 99 % of each silent
    # window's tiny energy; a shared one spends the frame's error budget where the
    # energy is.  Both must meet their budgets on the decoded samples.
    x = _loud_and_silent()
    bits = {}
    for scope in ("window", "frame"):
        prof = codec.Profile(fidelity_scope=scope)
        enc = codec.encode(x, prof)
        dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
        assert_meets_target(x, dec.samples, enc.profile)
        bits[scope] = len(enc.data) * 8
    assert bits["frame"] < 0.5 * bits["window"], bits


def _water_filling(var: np.ndarray, d: float) -> float:
    """Reverse water-filling: bits per component for independent Gaussians at total error d.

    Cover & Thomas, Elements of Information Theory (2nd ed., 2006), Theorem
    10.3.3: D_i = min(theta, var_i) with sum D_i = d, R = sum max(0, 1/2 log2(var_i / D_i)).
    """
    lo, hi = 0.0, float(var.max())
    for _ in range(200):
        theta = 0.5 * (lo + hi)
        if np.minimum(theta, var).sum() > d:
            hi = theta
        else:
            lo = theta
    dk = np.minimum(0.5 * (lo + hi), var)
    return float(np.maximum(0.0, 0.5 * np.log2(var / dk)).sum() / var.size)


@pytest.mark.parametrize("spread", [1.0, 2.0, 3.0])
def test_one_step_per_block_allocates_as_reverse_water_filling(spread):
    # Eight windows per frame, window k white Gaussian with its own variance
    # (spread: decades between the quietest and the loudest).  One step per block
    # gives every window the error the water-filling optimum gives it (Cover &
    # Thomas, Theorem 10.3.3; at high rate a uniform quantizer errs step^2 / 12 per
    # coded coefficient): the Gaussian rates of the errors actually allotted,
    # sum max(0, 1/2 log2(var_k / D_k)), match the optimum's at the same total error
    # within 0.05 bits/sample.  Per-window budgets (window scope) do not.
    n, k, frames = 64, 8, 300
    rng = np.random.default_rng(11)
    var = 10.0 ** np.linspace(0.0, spread, k)
    x = rng.normal(size=(frames, k, n)) * np.sqrt(var)[None, :, None]
    x = x.reshape(-1, 1)
    gaps = {}
    for scope in ("frame", "window"):
        prof = codec.Profile(frame_length=n, fidelity=0.99, reference="total",
                             fidelity_scope=scope)
        enc = codec.encode(x, prof)
        dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
        e = (x - dec.samples).reshape(frames, k, n)
        d_k = (e**2).mean(axis=(0, 2))  # error per sample allotted to window position k
        v_k = (x.reshape(frames, k, n) ** 2).mean(axis=(0, 2))
        r_alloc = float(np.maximum(0.0, 0.5 * np.log2(v_k / d_k)).mean())
        gaps[scope] = r_alloc - _water_filling(v_k, d_k.sum())
    assert abs(gaps["frame"]) <= 0.05, gaps
    assert gaps["window"] > 0.05, gaps  # the check has teeth: equal fractions are not optimal


def test_reports_say_which_scope_holds(tmp_path):
    x = _loud_and_silent(frames=4)
    src = tmp_path / "in.csv"
    np.savetxt(src, x, delimiter=",", header="s", comments="")
    for scope in ("window", "frame"):
        rep = tmp_path / f"{scope}.json"
        assert main(["roundtrip", str(src), "--scope", scope, "--json", str(rep)]) == 0
        r = json.loads(rep.read_text())
        assert r["fidelity_scope"] == scope
        # 32 windows; in frame scope one block per frame of the default windows_per_frame
        assert r["budget_blocks"] == (32 if scope == "window"
                                      else 32 // codec.Profile().windows_per_frame)
        assert r["blocks_below_target"] == 0 and r["fidelity_min"] >= 0.99
        if scope == "frame":  # a silent window alone is far below F; its frame is not
            assert r["window_fidelity_min"] < 0.99
        pf = r["per_frame"]
        assert min(pf["block_fidelity"]) >= 0.99 and all(pf["met"])
        assert len(set(pf["budget_block"])) == r["budget_blocks"]
    cmp = codec.compare_bases(x, codec.Profile(fidelity_scope="frame"), bases="dct",
                              fidelities=(0.99,), train_fraction=0.0)
    assert {r["fidelity_scope"] for r in cmp.rows} == {"frame"}
    assert all(r["frames_below_target"] == 0 for r in cmp.rows)
    out = tmp_path / "cmp.json"
    assert main(["compare", str(src), "--bases", "dct", "--fidelity", "0.99", "--scope",
                 "window", "--train-fraction", "0", "--json", str(out)]) == 0
    r = json.loads(out.read_text())
    assert r["fidelity_scope"] == "window"
    assert {row["fidelity_scope"] for row in r["rows"]} == {"window"}


def test_scope_is_not_part_of_the_profile_id():
    # only the encoder reads it: a decoder needs no scope to decode either stream
    a, b = codec.Profile(fidelity_scope="window"), codec.Profile(fidelity_scope="frame")
    assert codec.profile_id(a) == codec.profile_id(b)
