"""Receiver: accounting, concealment, CRC false accepts, plausible-range flags, CLI."""

from __future__ import annotations

import json

import numpy as np
import pytest
from realdata import MOTION_CHANNELS, motion

import codec
from codec.cli import main
from link_sim import CONCEAL_POLICIES, ChannelConfig, conceal, receive, simulate
from link_sim._receiver import CONCEALED, DELIVERED, LOST


@pytest.fixture(scope="module")
def data():
    return motion()[:1280]  # 20 windows x 6 channels = 120 frames at N=64


@pytest.fixture(scope="module")
def coded(data):
    # layout 1: the forged-frame checks below flip bytes at v1 field offsets
    profile = codec.default_profile().bind(MOTION_CHANNELS).model_copy(
        update={"layout_version": 1})
    return codec.encode(data, profile)


CHANNELS = [
    ChannelConfig("bsc", ber=2e-3),
    ChannelConfig("awgn", ebn0_db=5.0),
    ChannelConfig("awgn", ebn0_db=5.0, modulation="qpsk"),
    ChannelConfig("burst", ber=1e-4, burst_length_bits=40, bad_fraction=0.01, ber_bad=0.5),
    ChannelConfig("erasure", loss_rate=0.2),
]


@pytest.mark.parametrize("cfg", CHANNELS, ids=lambda c: f"{c.kind}-{c.modulation}")
@pytest.mark.parametrize("policy", CONCEAL_POLICIES)
def test_every_sample_is_delivered_concealed_or_lost(data, coded, cfg, policy):
    # Accounting identity (issue 5): delivered + concealed + lost = samples in, per trial.
    # The sums alone hold by construction; the exact per-sample status against what the
    # link did is checked in test_accounting.py.
    r = simulate(data, coded.profile, cfg, fec="hamming74" if cfg.kind == "bsc" else "none",
                 trials=2, seed=3, policy=policy, enc=coded)
    assert r["samples_delivered"] + r["samples_concealed"] + r["samples_lost"] == data.size
    assert r["frames_delivered"] + r["frames_dropped_crc"] + r["frames_erased"] == 120
    if policy == "none":
        assert r["samples_concealed"] == 0
    if cfg.kind == "erasure":
        assert r["ber_channel"] == 0 and r["frames_erased"] > 0


@pytest.mark.parametrize("cfg", CHANNELS[:2] + CHANNELS[-1:], ids=lambda c: c.kind)
def test_frames_are_counted_on_the_wire_with_multi_window_frames(data, cfg):
    # The default layout carries several windows of a channel in one frame: frames sent,
    # delivered, dropped and erased are counted in the same unit (frames on the wire).
    enc = codec.encode(data, codec.default_profile().bind(MOTION_CHANNELS))
    wire = enc.report["frames_on_wire"]
    assert wire < enc.report["frames"]  # several windows per frame
    r = simulate(data, enc.profile, cfg, fec="none", trials=2, seed=5, enc=enc)
    assert r["frames_sent"] == wire
    assert r["frames_delivered"] + r["frames_dropped_crc"] + r["frames_erased"] == wire
    clean = simulate(data, enc.profile, ChannelConfig("bsc", ber=0.0), fec="none", trials=1,
                     seed=5, enc=enc)
    assert clean["frames_delivered"] == wire and clean["samples_delivered"] == data.size


def test_concealment_policies_on_a_hand_example():
    x = np.array([[1.0], [np.nan], [np.nan], [4.0], [np.nan]])
    got = np.isfinite(x)
    out, st = conceal(x, got, "hold")
    np.testing.assert_array_equal(out[:, 0], [1, 1, 1, 4, 4])
    out, st = conceal(x, got, "linear")  # numpy.interp is the reference
    np.testing.assert_allclose(out[:, 0], np.interp(np.arange(5), [0, 3], [1, 4]))
    out, st = conceal(x, got, "zero")
    np.testing.assert_array_equal(out[:, 0], [1, 0, 0, 4, 0])
    out, st = conceal(x, got, "none")
    assert np.isnan(out[[1, 2, 4], 0]).all()
    np.testing.assert_array_equal(st[:, 0], [DELIVERED, LOST, LOST, DELIVERED, LOST])
    # hold cannot fill a span before the first delivered sample
    out, st = conceal(x[::-1].copy(), got[::-1].copy(), "hold")
    assert st[0, 0] == LOST and st[1, 0] == DELIVERED and st[2, 0] == CONCEALED


def _with_crc(buf: bytearray, off: int, length: int, profile) -> None:
    """Recompute a frame's CRC-16/IBM-3740 (the codec's CRC) after tampering."""
    # the codec's CRC: over the profile's implicit prefix (FRAME_LAYOUT.md, "Profile check")
    prefix = codec.frame_key(profile).prefix(length)
    crc = codec.crc16_ibm3740(prefix + bytes(buf[off + 2: off + length - 2]))
    buf[off + length - 2: off + length] = crc.to_bytes(2, "big")


def test_crc_valid_but_corrupted_frames_are_counted_not_crashed(data, coded):
    # Through a noisy channel a corrupted frame passes CRC-16 with probability
    # about 2^-16; we forge two such frames by recomputing their CRC.
    lengths = coded.frames["bits"] // 8
    starts = np.cumsum(lengths) - lengths
    rx = bytearray(coded.data)
    o, L = int(starts[5]), int(lengths[5])
    rx[o + L - 4] ^= 0x10  # a payload byte: header still fits the profile
    _with_crc(rx, o, L, coded.profile)
    o, L = int(starts[9]), int(lengths[9])
    rx[o + 5] ^= 0xFF  # profile id field: the codec refuses this header
    _with_crc(rx, o, L, coded.profile)
    arrived = np.ones(lengths.size, bool)
    rec = receive(bytes(rx), coded.data, arrived, lengths, coded.profile, data.shape[0])
    assert rec.frames_rejected_header == 1
    assert rec.frames_delivered == lengths.size - 1
    assert rec.frames_undetected_errors == 1
    assert ((rec.status == DELIVERED) | (rec.status == CONCEALED)).all()


def test_out_of_range_values_are_flagged(data, coded):
    # channel 0's plausible maximum set just below the peak of its decoded samples (a lossy
    # code need not reach the input's own peak)
    hi = float(coded.reconstruction[:, 0].max()) - 1e-6
    chans = [c.model_copy(update={"valid_max": hi}) if i == 0 else c
             for i, c in enumerate(coded.profile.channels)]
    profile = coded.profile.model_copy(update={"channels": tuple(chans)})
    enc = codec.encode(data, profile)
    lengths = enc.frames["bits"] // 8
    rec = receive(enc.data, enc.data, np.ones(lengths.size, bool), lengths, profile,
                  data.shape[0])
    expected = (enc.reconstruction[:, 0] > hi).sum()
    assert rec.frames_out_of_range >= 1
    assert rec.out_of_range[:, 0].sum() == expected and not rec.out_of_range[:, 1:].any()


def test_total_erasure_loses_everything(data, coded):
    r = simulate(data, coded.profile, ChannelConfig("erasure", loss_rate=1.0), trials=1,
                 policy="hold", enc=coded)
    assert r["samples_lost"] == data.size and r["frames_delivered"] == 0


def test_rs_delivers_where_uncoded_frames_mostly_fail(data, coded):
    # Issue 5 acceptance in small: at Eb/N0 = 6 dB uncoded BPSK loses most frames
    # (P_b = Q(sqrt(2 Eb/N0)) = 2.4e-3 on ~700-bit frames: 1 - (1 - P_b)^700 = 0.81),
    # RS(255,223) I=1 delivers most of them though its parity lowers Es/N0 by 0.65 dB.
    cfg = ChannelConfig("awgn", ebn0_db=6.0)
    plain = simulate(data, coded.profile, cfg, fec="none", seed=1, enc=coded)
    rs = simulate(data, coded.profile, cfg, fec="rs255", seed=1, enc=coded)
    assert plain["frames_delivered"] < 0.5 * 120
    assert rs["frames_delivered"] > 0.9 * 120
    assert rs["bits_on_air_per_sample"] > plain["bits_on_air_per_sample"]


def test_simulate_command_writes_the_json_keys(tmp_path, data, capsys):
    csv = tmp_path / "motion.csv"
    np.savetxt(csv, data[:640], delimiter=",", header=",".join(MOTION_CHANNELS),
               comments="")
    out = tmp_path / "r.json"
    png = tmp_path / "r.png"
    assert main(["simulate", str(csv), "--channel", "awgn", "--ebn0", "4:8:2", "--trials", "2",
                 "--json", str(out), "--plot", str(png)]) == 0
    rows = json.loads(out.read_text())
    keys = ["ebn0_db", "ber_channel", "ber_post_fec", "frames_sent", "frames_delivered",
            "frames_dropped_crc", "frames_undetected_errors", "samples_delivered",
            "samples_concealed", "samples_lost", "bits_on_air_per_sample", "snr_db_end_to_end"]
    assert [r["ebn0_db"] for r in rows] == [4.0, 6.0, 8.0]
    for r in rows:
        assert all(k in r for k in keys)
        assert r["samples_delivered"] + r["samples_concealed"] + r["samples_lost"] == 640 * 6
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "regulat" in capsys.readouterr().out
    burst = tmp_path / "b.json"
    assert main(["simulate", str(csv), "--channel", "burst", "--ber", "1e-4", "--burst-length",
                 "30", "--fec", "rs255", "--interleave", "2", "--json", str(burst)]) == 0
    r = json.loads(burst.read_text())
    assert r["samples_delivered"] + r["samples_concealed"] + r["samples_lost"] == 640 * 6
    assert r["bits_on_air_per_sample"] > r["bits_codec_per_sample"]
    assert main(["simulate", str(csv), "--channel", "erasure", "--loss-rate", "0.3",
                 "--conceal", "linear"]) == 0
    assert main(["simulate", str(csv), "--channel", "bsc"]) == 2  # needs --ber
    assert main(["simulate", str(csv), "--ebn0", "8:4:1"]) == 2
