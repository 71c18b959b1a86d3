"""Gaps in the sensor stream: refuse, fill, mark; the gap-mask frame packed by hand."""

from __future__ import annotations

import hashlib

import bitstring
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from realdata import motion
from streams import EXAMPLE_DIGEST, assert_accounting, digest_of, with_crc

import codec
from codec.layouts.gapmask import fill_gaps, pack_gap_frame, parse_gap_frame
from codec.layouts.v1v2 import FrameKey
from codec.stream.search import locate_frames


def _with_gaps(x: np.ndarray) -> np.ndarray:
    x = x.copy()
    x[0, 0] = np.nan  # first sample
    x[40:45, 1] = np.nan  # a short run inside a frame
    x[64:128, 2] = np.nan  # exactly one whole frame (N = 32: windows 2 and 3)
    x[-3:, 0] = np.nan  # the end of the stream
    x[200::7, 1] = np.nan  # scattered single samples
    return x


def test_mark_reproduces_nans_exactly():
    x = _with_gaps(motion("train")[:300, :3])
    enc = codec.encode(x, codec.Profile(frame_length=32), gaps="mark")
    assert enc.report["samples_gap"] == int(np.isnan(x).sum())
    dec = codec.decode(enc.data, enc.profile, samples=300)
    assert np.array_equal(np.isnan(dec.samples), np.isnan(x))
    assert np.array_equal(dec.status == codec.GAP, np.isnan(x))
    assert np.array_equal(dec.samples, enc.reconstruction, equal_nan=True)
    assert dec.counts["samples_gap"] == np.isnan(x).sum()
    assert_accounting_gap(dec)
    # The whole-gap frames send no data frame, only their masks: 28 data rows of 30.
    assert dec.frames["window"].size == 10 * 3 - 2
    assert dec.counts["frames_ok"] + dec.counts["gap_frames_ok"] == len(locate_frames(enc.data)
                                                                          .offsets)


def assert_accounting_gap(dec):
    c = dec.counts
    assert c["samples_delivered"] + c["samples_lost"] + c["samples_gap"] == dec.status.size


@settings(max_examples=12, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 199), st.integers(1, 40), st.integers(0, 1)),
                max_size=6), st.sampled_from([2, 7, 16, 64]))
def test_mark_roundtrip_any_nan_runs(runs, n):
    x = np.cumsum(np.random.default_rng(1).normal(size=(200, 2)), axis=0)
    for start, length, ch in runs:
        x[start : start + length, ch] = np.nan
    enc = codec.encode(x, codec.Profile(frame_length=n), gaps="mark")
    dec = codec.decode(enc.data, enc.profile, samples=200)
    assert np.array_equal(np.isnan(dec.samples), np.isnan(x))
    se = codec.StreamEncoder(enc.profile, 2, gaps="mark")
    # Streaming mark equals batch mark only where a fill never crosses a block edge; the
    # masks (what the receiver sees as NaN) are equal always.
    live = b"".join(se.feed(x[i : i + 50]) for i in range(0, 200, 50)) + se.close()
    d2 = codec.decode(live, enc.profile, samples=200)
    assert np.array_equal(np.isnan(d2.samples), np.isnan(x))


@pytest.mark.parametrize("layout", [1, 2])
def test_gap_masks_and_data_travel_together(layout):
    x = _with_gaps(motion("train")[:300, :3])
    enc = codec.encode(x, codec.Profile(frame_length=32, layout_version=layout), gaps="mark")
    loc = locate_frames(enc.data)
    kinds = [enc.data[o + 2] >> 4 for o in loc.offsets.tolist()]
    g = kinds.index(15)
    # Losing a gap-mask frame loses its window's data with it: never interpolated values.
    cut = enc.data[: loc.offsets[g]] + enc.data[loc.offsets[g] + loc.lengths[g] :]
    dec = codec.decode(cut, enc.profile, samples=300)
    assert (dec.status[:32, 0] == codec.LOST).all()
    assert_accounting(dec, 3)
    full = codec.decode(enc.data, enc.profile, samples=300)
    assert np.array_equal(np.isnan(full.samples), np.isnan(x))


def test_fill_interpolates_and_counts():
    x = np.arange(100.0)[:, None] * np.ones((1, 2))
    x[10:20, 0] = np.nan
    x[:3, 1] = np.nan
    filled, missing = fill_gaps(x)
    # Reference: numpy.interp between the known neighbours (a line here, so exact).
    assert np.allclose(filled[10:20, 0], np.arange(10.0, 20.0))
    assert np.array_equal(filled[:3, 1], np.full(3, 3.0))  # held flat before the first known
    enc = codec.encode(x, codec.Profile(frame_length=16), gaps="fill")
    assert enc.report["samples_gap"] == 13
    dec = codec.decode(enc.data, enc.profile, samples=100)
    assert dec.delivered.all()


def test_refuse_is_the_default():
    x = np.ones((50, 1))
    x[5] = np.nan
    with pytest.raises(codec.InputError, match="non-finite"):
        codec.encode(x, codec.Profile())
    x[:] = np.nan
    with pytest.raises(codec.InputError, match="no finite sample"):
        codec.encode(x, codec.Profile(), gaps="fill")


def test_gap_frame_layout_by_hand():
    # N = 8 (index bits 3), window 70000 (sequence 70000 mod 65536 = 4464), valid 8,
    # channel 2 missing positions 1-2 and 6: runs (1, 2) and (6, 1); inner frame 3 bytes.
    mask = np.array([0, 1, 1, 0, 0, 0, 1, 0], bool)
    inner = b"\xe3\x5a\x10"
    got = pack_gap_frame(profile=0xBEEF, sequence=70000, valid=8, masks=[(2, mask)],
                         inner=inner, n=8, key=FrameKey(EXAMPLE_DIGEST))
    # Reference built field by field with bitstring from the table in codec/layouts/gapmask.py:
    # kind 15, flags 0, length, profile, sequence, valid, masks 1, reserved 0; then
    # channel 2, runs 2, (start, count - 1) = (1, 1), (6, 0); zero padding; inner; CRC.
    mask_bits = 8 + 13 + 4 * 3
    length = 2 + 10 + (mask_bits + 7) // 8 + len(inner) + 2
    body = bitstring.pack("uint:4, uint:4, uint:16, uint:16, uint:16, uint:13, uint:9, uint:2,"
                          "uint:8, uint:13, uint:3, uint:3, uint:3, uint:3, uint:7",
                          15, 0, length, 0xBEEF, 4464, 8, 1, 0, 2, 2, 1, 1, 6, 0, 0
                          ).tobytes() + inner
    # CRC-16/IBM-3740 over the implicit profile prefix (digest 00 01 ... 1f), rebuilt
    # from binascii and hashlib (streams.with_crc); bytes printed in FRAME_LAYOUT.md.
    want = with_crc(b"\xe3\x5a" + body, EXAMPLE_DIGEST)
    assert got == want and length == 22
    assert want.hex() == "e35af00016beef11700040040200113800e35a106e6f"
    head, masks, back_inner = parse_gap_frame(got, 8, 3)
    assert head["sequence"] == 4464 and back_inner == inner
    assert masks[0][0] == 2 and np.array_equal(masks[0][1], mask)


def test_gap_frame_parser_bounds_every_count():
    key = FrameKey(EXAMPLE_DIGEST)
    good = pack_gap_frame(1, 0, 8, [(0, np.array([1, 0, 1, 0, 1, 0, 1, 0], bool))], b"", 8, key)
    assert isinstance(parse_gap_frame(good, 8, 1), tuple)
    assert isinstance(parse_gap_frame(good, 4, 1), str)  # valid 8 > N 4
    assert isinstance(parse_gap_frame(good, 8, 0), str)  # more masks than channels
    assert isinstance(parse_gap_frame(good[:-3], 8, 1), str)
    # A forged frame whose CRC is right but whose runs overlap is refused too.
    two = pack_gap_frame(1, 0, 8, [(0, np.array([1, 0, 0, 1, 0, 0, 0, 0], bool))], b"", 8, key)
    bits = np.unpackbits(np.frombuffer(two, np.uint8)).copy()
    start2 = 16 + 80 + 21 + 6  # second run's start field
    bits[start2 : start2 + 3] = [0, 0, 0]  # 3 -> 0: overlaps the first run
    body = np.packbits(bits).tobytes()[2:-2]
    forged = with_crc(two[:2] + body, EXAMPLE_DIGEST)
    assert parse_gap_frame(forged, 8, 1).startswith("gap frame runs overlap")


@pytest.mark.parametrize("inner", [False, True], ids=["masks-only", "wrapping-data"])
def test_a_foreign_gap_frame_is_refused(inner):
    # The sender's truth: 8 windows x 2 channels, one window per frame, frames in window-
    # major order (FRAME_LAYOUT.md), so frame 2 w + c carries window w of channel c.  The
    # frame of window 3, channel 0 is replaced by a gap-mask frame (masks only, or wrapping
    # that very data frame) whose profile field names another profile: the decoder must
    # refuse it whole, so those 32 samples are lost, never marked as gaps nor delivered.
    # The same gap frame under our own profile id is accepted (the control).
    x = motion("train")[:256, :2]
    enc = codec.encode(x, codec.Profile(frame_length=32, windows_per_frame=1))
    frames = [enc.data[o : o + n] for o, n in zip(locate_frames(enc.data).offsets.tolist(),
                                                  locate_frames(enc.data).lengths.tolist())]
    assert len(frames) == 16
    mask = np.zeros(32, bool)
    mask[:32 if not inner else 5] = True
    ours = codec.profile_id(enc.profile)
    other = codec.profile_id(enc.profile.model_copy(update={"fidelity": 0.5}))
    assert other != ours
    rows = slice(96, 128)
    # a wrapped data frame is signed with the inner key, SHA-256(digest || "gap-mask inner
    # frame") (FRAME_LAYOUT.md, "Profile check"), so that found alone it fails its CRC
    inner_digest = hashlib.sha256(digest_of(enc.profile) + b"gap-mask inner frame").digest()
    wrapped = with_crc(frames[6][:-2], inner_digest) if inner else b""
    for pid in (ours, other):
        # our CRC key, the other profile's id in the header: the id check must refuse it
        gap = pack_gap_frame(pid, 3, 32, [(0, mask)], wrapped, 32, codec.frame_key(enc.profile))
        dec = codec.decode(b"".join(frames[:6] + [gap] + frames[7:]), enc.profile,
                           samples=256)
        want = np.full(x.shape, codec.DELIVERED, np.uint8)
        if pid == ours:
            want[rows, 0] = np.where(mask, codec.GAP, codec.DELIVERED)
            assert dec.counts["gap_frames_ok"] == 1
        else:
            want[rows, 0] = codec.LOST
            assert dec.counts["frames_foreign_profile"] == 1 and dec.counts["gap_frames_ok"] == 0
        np.testing.assert_array_equal(dec.status, want)
        ok = want == codec.DELIVERED
        np.testing.assert_array_equal(dec.samples[ok], enc.reconstruction[ok])
