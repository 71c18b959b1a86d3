"""Accounting against the sender's truth: exact per-sample status, not only the sums.

The test is the sender: it knows which frames it dropped, corrupted, duplicated
or delayed, and which samples each frame carried.  Frame order on the wire is
the one FRAME_LAYOUT.md states for single-channel frames: time groups of
``windows_per_frame`` windows in order, and within a group the channels in
profile order, so frame k carries channel k mod C of windows
[(k div C) W, (k div C + 1) W).  A multi-channel frame k (the default from
layout 7) carries every channel of windows [k W, (k + 1) W).
"""

from __future__ import annotations

import numpy as np
import pytest
from realdata import motion
from streams import digest_of, keyed_crc

import codec
import link_sim._simulate as sim
from codec.stream.search import locate_frames
from link_sim import ChannelConfig, receive
from link_sim._receiver import CONCEALED, DELIVERED, LOST

N, SAMPLES, CHANNELS = 32, 640, 2  # 20 windows of 2 channels


def _sender(windows_per_frame: int, multi: bool = False):
    x = motion("train")[:SAMPLES, :CHANNELS]
    enc = codec.encode(x, codec.Profile(frame_length=N, windows_per_frame=windows_per_frame,
                                        multi_channel_frames=multi))
    loc = locate_frames(enc.data)
    frames = [enc.data[o : o + n] for o, n in zip(loc.offsets.tolist(), loc.lengths.tolist())]
    assert len(frames) == (1 if multi else CHANNELS) * (SAMPLES // N) // windows_per_frame
    return x, enc, frames


def _carried(k: int, w: int, multi: bool = False) -> tuple[slice, int | slice]:
    """Rows and channel(s) that frame ``k`` carries (the layout's frame order)."""
    g, c = (k, slice(None)) if multi else divmod(k, CHANNELS)
    return slice(g * w * N, min((g + 1) * w * N, SAMPLES)), c


def _flip_payload(frame: bytes) -> bytes:
    b = bytearray(frame)
    b[len(b) // 2] ^= 0x40  # a byte inside the frame: its CRC-16 fails
    return bytes(b)


@pytest.mark.parametrize("w, multi", [(1, False), (4, False), (1, True), (2, True)])
def test_decoder_status_is_exactly_what_the_sender_did(w, multi):
    x, enc, f = _sender(w, multi)
    nf = len(f)
    drop, corrupt, dup, late = 5, 7, nf - 2, 2
    # the wire: frame 'late' arrives after every other frame (more than 'reorder'
    # = 8 windows late), frame 'dup' twice, frames 3 and 4 swapped (late but within reorder)
    order = [k for k in range(nf) if k not in (drop, late)]
    i3, i4 = order.index(3), order.index(4)
    order[i3], order[i4] = 4, 3
    wire = []
    for k in order:
        wire.append(_flip_payload(f[k]) if k == corrupt else f[k])
        if k == dup:
            wire.append(f[k])
    wire.append(f[late])
    dec = codec.decode(b"".join(wire), enc.profile, samples=SAMPLES, reorder=8, strict=False)
    want = np.full((SAMPLES, CHANNELS), codec.DELIVERED, np.uint8)
    for k in (drop, corrupt, late):
        rows, c = _carried(k, w, multi)
        want[rows, c] = codec.LOST
    np.testing.assert_array_equal(dec.status, want)
    ok = want == codec.DELIVERED
    np.testing.assert_array_equal(dec.samples[ok], enc.reconstruction[ok])
    assert np.isnan(dec.samples[~ok]).all()
    c = dec.counts
    assert c["frames_crc_failed"] == 1  # frames on the wire (no header can be read)
    # duplicates and late arrivals are counted in coded frames (one window of one channel,
    # the README's unit for 'frames'): w of them per frame on the wire
    per = w * (CHANNELS if multi else 1)
    assert c["frames_duplicate"] == per and c["frames_late"] == per
    assert c["samples_lost"] == 3 * per * N and c["samples_delivered"] == ok.sum()


def _link_case():
    x, enc, f = _sender(1)
    lengths = np.array([len(b) for b in f])
    arrived = np.ones(len(f), bool)
    arrived[[3, 10]] = False  # erased: never arrived
    rx = bytearray(enc.data)
    starts = np.cumsum(lengths) - lengths
    rx[starts[7] + lengths[7] // 2] ^= 0x40  # CRC fails
    # frame 12: a payload byte changed and its CRC recomputed, as a corrupted frame that
    # passes CRC-16 by chance (about 2^-16): delivered, and counted as an undetected error
    o, n = int(starts[12]), int(lengths[12])
    digest = digest_of(enc.profile)
    # the first coefficient byte (the header ends before byte 10) whose change still
    # decodes and changes the samples: a change the range decoder sees as impossible is
    # refused, not delivered, and a change in a bit the decoder never reads delivers the
    # right samples (no error to count)
    rows, c = _carried(12, 1)
    for b in range(10, n - 2):
        bad = bytearray(rx[o : o + n])
        bad[b] ^= 0x01
        # the CRC covers the profile digest (FRAME_LAYOUT.md, "Profile check"): rebuilt here
        bad[-2:] = keyed_crc(bytes(bad[:-2]), digest).to_bytes(2, "big")
        d = codec.decode(bytes(bad), enc.profile, samples=SAMPLES, strict=False)
        if d.counts.get("frames_ok") == 1 and not np.array_equal(
                d.samples[rows, c], enc.reconstruction[rows, c]):
            rx[o : o + n] = bad
            break
    else:
        raise AssertionError("no decodable one-bit change in frame 12")
    return x, enc, bytes(rx), arrived, lengths


@pytest.mark.parametrize("policy", ["none", "hold", "zero"])
def test_receiver_status_is_exactly_what_the_link_did(policy):
    x, enc, rx, arrived, lengths = _link_case()
    rec = receive(rx, enc.data, arrived, lengths, enc.profile, SAMPLES, policy)
    gone = np.zeros((SAMPLES, CHANNELS), bool)
    for k in (3, 10, 7):
        rows, c = _carried(k, 1)
        gone[rows, c] = True
    # none leaves them lost; hold and zero fill them (each lost span has a delivered
    # sample before it in its channel, so hold can fill it too)
    want = np.where(gone, LOST if policy == "none" else CONCEALED, DELIVERED)
    np.testing.assert_array_equal(rec.status, want)
    rows, c = _carried(12, 1)
    wrong = np.zeros_like(gone)
    wrong[rows, c] = True
    good = ~gone & ~wrong
    np.testing.assert_array_equal(rec.samples[good], enc.reconstruction[good])
    assert not np.array_equal(rec.samples[wrong], enc.reconstruction[wrong])
    if policy == "zero":
        assert (rec.samples[gone] == 0).all()
    assert rec.frames_delivered == len(lengths) - 3 and rec.crc_failures == 1
    assert rec.frames_undetected_errors == 1 and rec.frames_rejected_header == 0


def test_simulator_counts_are_what_the_link_did(monkeypatch):
    # The simulator's own channel and erasures replaced by the test's: uncoded, frames 3
    # and 10 erased, one bit flipped inside frame 7 (its CRC fails).  Every count of the
    # trial must follow, including frames dropped by CRC (which the simulator derives).
    x, enc, f = _sender(1)
    lengths = np.array([len(b) for b in f])
    bit = 8 * int(lengths[:7].sum() + lengths[7] // 2)

    def channel(bits, cfg, rng, rate, soft):
        out = bits.copy()
        out[bit] ^= 1
        return out

    def erasures(count, loss_rate, rng):
        keep = np.ones(count, bool)
        keep[[3, 10]] = False
        return keep

    monkeypatch.setattr(sim, "transmit_bits", channel)
    monkeypatch.setattr(sim, "erase_frames", erasures)
    r = sim.run_trial(x, enc, sim.make_code("none"), ChannelConfig("bsc"),
                      np.random.default_rng(0), policy="none")
    assert r["frames_sent"] == len(f) and r["frames_erased"] == 2
    assert r["frames_dropped_crc"] == 1 and r["frames_delivered"] == len(f) - 3
    assert r["frames_undetected_errors"] == 0
    assert r["samples_lost"] == 3 * N and r["samples_concealed"] == 0
    assert r["samples_delivered"] == x.size - 3 * N
    assert r["ber_post_fec"] == 1 / (8 * len(enc.data))
