"""Gaps in the sensor stream: refuse, fill, mark; the gap-mask frame packed by hand."""

from __future__ import annotations

import bitstring
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from realdata import motion
from streams import EXAMPLE_DIGEST, assert_accounting, with_crc

import codec
from codec.layouts.envelope import FrameKey
from codec.layouts.gapmask import (
    fill_gaps,
    mask_runs,
    pack_gap_frame,
    read_gap_runs,
    unwrap_gap_frame,
)
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
    # Every row travels (an all-gap window with no coefficients): 30 data rows of 30.
    assert dec.frames["window"].size == 10 * 3
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


@pytest.mark.parametrize("layout", [1, 2, 3])
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


def _example_mask() -> np.ndarray:
    # P = 16 samples (two full windows of N = 8 of one channel); missing 1-2, 7-9 (across
    # the window boundary) and 14: runs (1, 2), (7, 3), (14, 1).
    mask = np.zeros(16, bool)
    mask[[1, 2, 7, 8, 9, 14]] = True
    return mask


#: The worked example's stand-in inner frame: a version-3 envelope claiming 8 bytes
#: (0x30 0x08: version 3, short length 8), profile byte 0xef, sequence 0x12, CRC 0xabcd.
_EXAMPLE_INNER = bytes.fromhex("e35a3008ef12abcd")


def test_gap_frame_layout_by_hand():
    got = pack_gap_frame(_EXAMPLE_INNER, _example_mask(), FrameKey(EXAMPLE_DIGEST))
    # Reference built field by field with bitstring from the table in FRAME_LAYOUT.md
    # ("Gap-mask frame"): kind 15, format 1, length 14; the inner frame without its sync
    # and CRC; runs - 1 = 2 and each count - 1 as bitstring's own Exp-Golomb ("ue"); each
    # start in bit_length(16 - 1) = 4 bits; zero padding to a byte.
    runs = bitstring.pack("ue, uint:4, ue, uint:4, ue, uint:4, ue", 2, 1, 1, 7, 2, 14, 0)
    assert len(runs) == 22
    runs += bitstring.Bits(bin="00")  # 22 bits: two zero bits of padding
    length = 5 + (len(_EXAMPLE_INNER) - 4) + len(runs) // 8 + 2
    body = bitstring.pack("uint:4, uint:4, uint:16", 15, 1, length).tobytes() \
        + _EXAMPLE_INNER[2:-2] + runs.tobytes()
    # CRC-16/IBM-3740 over the implicit profile prefix (digest 00 01 ... 1f), rebuilt
    # from binascii and hashlib (streams.with_crc); bytes printed in FRAME_LAYOUT.md.
    want = with_crc(b"\xe3\x5a" + body, EXAMPLE_DIGEST)
    assert got == want and length == 14
    assert want.hex() == EXAMPLE_HEX
    inner, at = unwrap_gap_frame(got)
    assert inner == _EXAMPLE_INNER[:-2] + b"\0\0" and at == 8 * 9
    assert np.array_equal(read_gap_runs(got, at, 16), _example_mask())


EXAMPLE_HEX = "e35af1000e3008ef12629df4e99c"


def _forge(runs: str, samples_inner: bytes = _EXAMPLE_INNER, nibble: int = 1,
           extra: bytes = b"") -> bytes:
    """A CRC-valid gap-mask frame with hand-written run bits (an insider's forgery)."""
    bits = bitstring.Bits(bin=runs + "0" * (-len(runs) % 8))
    length = 5 + len(samples_inner) - 4 + len(bits) // 8 + len(extra) + 2
    body = bitstring.pack("uint:4, uint:4, uint:16", 15, nibble, length).tobytes() \
        + samples_inner[2:-2] + bits.tobytes() + extra
    return with_crc(b"\xe3\x5a" + body, EXAMPLE_DIGEST)


def test_gap_frame_parser_bounds_every_count():
    def verdict(frame, samples=16):
        got = unwrap_gap_frame(frame)
        return got if isinstance(got, str) else read_gap_runs(frame, got[1], samples)

    # the control: one run (3, 2) of 16 samples, then a 1-bit run count
    assert isinstance(verdict(_forge("1" "0011" "010")), np.ndarray)
    past = "overlap, touch or pass"
    bad = {  # forged run bits -> the words of the refusal
        "1" "1111" "010": past,  # (15, 2): past the 16 samples
        "010" "0011" "010" "0100" "1": past,  # (3, 2) then (4, 1): overlapping
        "010" "0011" "010" "0101" "1": past,  # (3, 2) then (5, 1): touching
        "010" "1000" "1" "0011" "1": past,  # (8, 1) then (3, 1): decreasing
        "1" "0000" "0000011111": past,  # a count of 62 in 16 samples
        "0001001" + "0000" "1" * 17: "claims 9 runs",  # more than 16 samples can hold
        "0001000": "claims 8 runs",  # no bits left for them
        "1" "0000" + "0" * 40: "run longer",  # an Exp-Golomb prefix that never ends
        "1" "0011" "010" "1": "zero padding",  # padding not zero
    }
    for runs, words in bad.items():
        assert words in verdict(_forge(runs)), runs
    for frame, words in [
            (_forge("1" "0011" "010", extra=b"\0"), "zero padding"),  # a byte past the runs
            (_forge("1" "0011" "010", nibble=0), "format 0"),
            (_forge(""), "not one data frame"),  # no runs at all
            (_forge("1" "0011" "010", samples_inner=bytes.fromhex("e35af1000eabcd")),
             "wraps a gap frame"),
            (_forge("1" "0011" "010", samples_inner=bytes.fromhex("e35a3040ef12abcd")),
             "not one data frame")]:  # the inner envelope claims 64 bytes
        assert words in verdict(frame), words
    # a frame made of nothing but its header is refused before anything is read
    assert isinstance(unwrap_gap_frame(_forge("1")[:7]), str)
    assert isinstance(verdict(_forge("1" "0011" "010"), samples=0), str)


@pytest.mark.parametrize("layout", [1, 3])
def test_a_foreign_gap_frame_is_refused(layout):
    # The sender's truth: 8 windows x 2 channels, one window per frame, frames in window-
    # major order (FRAME_LAYOUT.md), so frame 2 w + c carries window w of channel c.  The
    # frame of window 3, channel 0 is replaced by a gap-mask frame wrapping (a) that very
    # data frame: accepted, its first 5 samples gaps (the control); (b) the same window's
    # frame of a stream coded under another profile, signed with our key: the inner
    # frame's profile field names that profile, so the decoder refuses it whole and the
    # 32 samples are lost, never marked as gaps nor delivered.
    x = motion("train")[:256, :2]
    prof = codec.Profile(frame_length=32, windows_per_frame=1, layout_version=layout)
    other = prof.model_copy(update={"fidelity": 0.5})
    ours = codec.profile_id(prof.bind(["a", "b"]))
    assert (ours ^ codec.profile_id(other.bind(["a", "b"]))) & 0xFF  # even the low bytes
    mask = np.zeros(32, bool)
    mask[:5] = True
    key = None
    rows = slice(96, 128)
    for which in (prof, other):
        enc = codec.encode(x, which)
        loc = locate_frames(enc.data)
        frames = [enc.data[o : o + n] for o, n in zip(loc.offsets.tolist(),
                                                       loc.lengths.tolist())]
        assert len(frames) == 16
        if which is prof:
            mine, key, profile, recon = frames, codec.frame_key(enc.profile), enc.profile, \
                enc.reconstruction
        gap = pack_gap_frame(frames[6], mask, key)
        dec = codec.decode(b"".join(mine[:6] + [gap] + mine[7:]), profile, samples=256)
        want = np.full(x.shape, codec.DELIVERED, np.uint8)
        if which is prof:
            want[rows, 0] = np.where(mask, codec.GAP, codec.DELIVERED)
            assert dec.counts["gap_frames_ok"] == 1
        else:
            want[rows, 0] = codec.LOST
            assert dec.counts["frames_foreign_profile"] == 1 and dec.counts["gap_frames_ok"] == 0
        np.testing.assert_array_equal(dec.status, want)
        ok = want == codec.DELIVERED
        np.testing.assert_array_equal(dec.samples[ok], recon[ok])


def _short_run_gaps(shape, fraction, rng) -> np.ndarray:
    """Missing-sample mask: runs of 1 to 5 samples at random places until ``fraction``."""
    miss = np.zeros(shape, bool)
    while miss.sum() < fraction * miss.size:
        length, ch = int(rng.integers(1, 6)), int(rng.integers(shape[1]))
        at = int(rng.integers(0, shape[0] - length))
        miss[at : at + length, ch] = True
    return miss


def test_marking_adds_only_wrappers_and_runs():
    # 0.6 % of a real recording missing in short runs.  Marking must leave every data
    # frame as the fill policy codes it (same grouping, same frame-scope budget), adding
    # per frame with gaps only the gap-mask header (3 bytes) and its runs, counted here
    # from the table in FRAME_LAYOUT.md with bitstring's Exp-Golomb ("ue"), less the inner
    # frame's sync marker and CRC that the gap-mask frame does not repeat.
    x = motion("train")[:2000, :3]
    miss = _short_run_gaps(x.shape, 0.006, np.random.default_rng(3))
    xg = np.where(miss, np.nan, x)
    prof = codec.Profile()
    fill = codec.encode(xg, prof, gaps="fill")
    mark = codec.encode(xg, prof, gaps="mark")
    key = codec.frame_key(mark.profile)
    lf, lm = locate_frames(fill.data, key), locate_frames(mark.data, key)
    assert lf.offsets.size == lm.offsets.size
    extra = 0
    wrapped = 0
    for (fo, fn), (mo, mn) in zip(zip(lf.offsets.tolist(), lf.lengths.tolist()),
                                  zip(lm.offsets.tolist(), lm.lengths.tolist())):
        ff, mf = fill.data[fo : fo + fn], mark.data[mo : mo + mn]
        if mf[2] >> 4 != 15:
            assert mf == ff
            continue
        wrapped += 1
        assert mf[5 : 5 + fn - 4] == ff[2:-2]  # the data frame, whole but sync and CRC
        inner, at = unwrap_gap_frame(mf)
        runs = read_gap_runs(mf, at, _samples_of(mark, inner))
        assert 0 <= 8 * (mn - 2) - at - _runs_bits(runs) < 8  # runs, then padding only
        extra += 8 * (mn - fn)
    assert wrapped > 0 and mark.report["bits_total"] == 8 * len(mark.data)
    assert extra == 8 * (len(mark.data) - len(fill.data))
    dec = codec.decode(mark.data, mark.profile, samples=x.shape[0])
    assert np.array_equal(dec.status == codec.GAP, miss)


def _runs_bits(mask: np.ndarray) -> int:
    start, count = mask_runs(mask)
    fmt = ", ".join(["ue"] + [f"uint:{int(mask.size - 1).bit_length()}, ue"] * start.size)
    vals = [start.size - 1] + [v for s, c in zip(start, count) for v in (int(s), int(c) - 1)]
    return len(bitstring.pack(fmt, *vals))


def _samples_of(enc, inner: bytes) -> int:
    """Valid samples of every window the inner data frame carries."""
    from codec.stream.frames import decode_frames
    from codec.transform.klt import profile_basis

    return int(decode_frames([inner], enc.profile, profile_basis(enc.profile)).row_valid.sum())


@pytest.mark.parametrize("layout, multi", [(1, False), (2, False), (2, True), (3, True),
                                           (4, False), (4, True)])
def test_mark_roundtrip_every_layout(layout, multi):
    # Gaps of every shape (a run across a window edge, whole windows, a whole channel of
    # one frame, the last sample) under every layout and frame packing: the decoder's NaN
    # are exactly the input's, every other sample is the encoder's reconstruction.
    x = motion("train")[:700, :3].copy()
    x[60:70, 0] = np.nan  # across the edge of windows 0 and 1 (N = 64)
    x[128:320, 1] = np.nan  # three whole windows
    x[400:403, 2] = np.nan
    x[-1, :] = np.nan
    prof = codec.Profile(layout_version=layout, multi_channel_frames=multi,
                         windows_per_frame=4)
    enc = codec.encode(x, prof, gaps="mark")
    dec = codec.decode(enc.data, enc.profile, samples=700)
    np.testing.assert_array_equal(dec.status == codec.GAP, np.isnan(x))
    np.testing.assert_array_equal(dec.samples, enc.reconstruction)
    assert dec.counts["samples_lost"] == 0


def test_mark_an_all_empty_channel():
    # A channel with no value at all under `mark`: filled with 0 for the coder, sent with
    # no coefficients, and every one of its samples comes back as a gap.
    x = motion("train")[:300, :2].copy()
    x[:, 1] = np.nan
    # single-channel frames: the frame table then shows each channel's terms
    enc = codec.encode(x, codec.Profile(frame_length=32, multi_channel_frames=False),
                       gaps="mark")
    dec = codec.decode(enc.data, enc.profile, samples=300)
    assert (dec.status[:, 1] == codec.GAP).all() and dec.delivered[:, 0].all()
    assert (dec.frames["terms"][dec.frames["channel"] == 1] == 0).all()


def test_a_gap_frame_too_long_for_its_length_field_is_an_input_error():
    # The 16-bit length field (FRAME_LAYOUT.md) bounds a gap-mask frame at 65 535 bytes.
    frame = b"\xe3\x5a" + bytes(70_000)
    with pytest.raises(codec.InputError, match="fewer windows per frame"):
        pack_gap_frame(frame, np.ones(4, bool), FrameKey(EXAMPLE_DIGEST))
