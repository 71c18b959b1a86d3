"""Frame layout version 3: the worked example of FRAME_LAYOUT.md and stream behaviour."""


import numpy as np
import pytest
from checks import assert_frames_decode_alone, assert_meets_target
from realdata import motion
from streams import EXAMPLE_DIGEST, keyed_crc, with_crc

import codec
from codec.layouts.envelope import FrameKey, frame_crc_ok, frame_extent
from codec.layouts.v3 import FrameBatchV3, pack_frames_v3, parse_frames_v3
from codec.stream.search import locate_frames

# FRAME_LAYOUT.md, "Version 3 worked example": N = 8, reference total, two
# channels, profile id 0xABCD, window 5, channel 1 alone, one full window,
# step code 512, q = [3, -1, 0, 0, 0, 0, 0, 0].  Header bits written out by
# hand from the layout table; the two coefficient bytes computed by hand with
# the range-coder arithmetic shown in the document.
HEADER_BITS = (
    "0011" "0" "00000001101" "11001101" "00000101" "0000" "0" "1" "0"
    "1000000000" "0010" "000"
)
EXAMPLE = bytes.fromhex("e35a") + int(HEADER_BITS, 2).to_bytes(7, "big") + bytes([0x0A, 0x45])
KEY = FrameKey(EXAMPLE_DIGEST)


def _example_batch():
    return FrameBatchV3(
        multi=np.array([False]), channel=np.array([1]), sequence=np.array([5]),
        windows=np.array([1]), valid=np.array([8]), frame=np.array([0]),
        step_code=np.array([512]), mean=None, q=np.array([[3, -1, 0, 0, 0, 0, 0, 0]]))


def test_worked_example_packs_to_the_documented_bytes():
    # CRC-16/IBM-3740 over the implicit profile prefix (digest 00 01 ... 1f), rebuilt
    # with binascii and hashlib
    crc = keyed_crc(EXAMPLE, EXAMPLE_DIGEST).to_bytes(2, "big")
    want = EXAMPLE + crc
    assert want.hex() == "e35a300dcd050500100a45b668"
    data, length, _, lane = pack_frames_v3(_example_batch(), 0xABCD, 8, 2, key=KEY)
    assert data == want and length.tolist() == [13] and lane.tolist() == [2]
    mv = memoryview(data)
    assert frame_extent(mv, 0) == 13 and frame_crc_ok(mv, 0, 13, KEY)
    p = parse_frames_v3(data, np.array([0]), np.array([13]), 8, 2, False)
    assert p.verdict == ("ok",)
    assert p.row_channel.tolist() == [1] and p.sequence.tolist() == [5]
    assert p.row_step.tolist() == [512] and p.row_count.tolist() == [2]
    assert p.q.tolist() == [[3, -1, 0, 0, 0, 0, 0, 0]]


# FRAME_LAYOUT.md, "Version 3 worked example with two windows": as above but
# reference ac and two windows from sequence 5; window 0: mean code 100, all
# coefficients 0 (count 0); window 1: mean code 103, q = [1, 0, ...] (count 1).
# Header and subframe bits written out by hand from the layout table (both
# change flags set: changes of 3 and +1 cost 5 + 3 bits against 15 + 4); the
# one coefficient byte by hand with the range-coder arithmetic in the document
# (coefficient 0 beside a mean: bit length from the row P(0) = 7/8, ratio 3/4).
HEADER2_BITS = (
    "0011" "0" "00000001111" "11001101" "00000101" "0001" "0" "1" "0" "1" "1"
    "1000000000" "000000011001001" "0000"
    "1" "00111" "011" "0"
)
EXAMPLE2 = bytes.fromhex("e35a") + int(HEADER2_BITS, 2).to_bytes(10, "big") + bytes([0xE0])


def test_two_window_example_sends_mean_and_count_as_changes():
    # the CRC over the implicit prefix SHA-256(D || 00 00 00 0f) of the example digest D,
    # rebuilt by the catalogue CRC-16/IBM-3740 of tests/crcref.py (FRAME_LAYOUT.md)
    want = with_crc(EXAMPLE2, EXAMPLE_DIGEST)
    assert want.hex() == "e35a300fcd0515c000324276e040e4"
    q = np.zeros((2, 8), np.int64)
    q[1, 0] = 1
    batch = FrameBatchV3(
        multi=np.array([False]), channel=np.array([1]), sequence=np.array([5]),
        windows=np.array([2]), valid=np.array([8]), frame=np.array([0, 0]),
        step_code=np.array([512, 512]), mean=np.array([100, 103]), q=q)
    data, length, _, lane = pack_frames_v3(batch, 0xABCD, 8, 2, key=KEY)
    assert data == want and length.tolist() == [15] and lane.tolist() == [1]
    p = parse_frames_v3(data, np.array([0]), np.array([15]), 8, 2, True)
    assert p.verdict == ("ok",)
    assert p.header["mean_change"].tolist() == [1] and p.header["count_change"].tolist() == [1]
    assert p.row_mean.tolist() == [100, 103] and p.row_count.tolist() == [0, 1]
    assert p.q.tolist() == q.tolist()


def test_means_near_zero_go_whole():
    # means 1, -1: changes (-2) cost more than the values, so the flag stays 0
    q = np.zeros((2, 8), np.int64)
    batch = FrameBatchV3(
        multi=np.array([False]), channel=np.array([0]), sequence=np.array([0]),
        windows=np.array([2]), valid=np.array([8]), frame=np.array([0, 0]),
        step_code=np.array([512, 512]), mean=np.array([1, -1]), q=q)
    data, *_ = pack_frames_v3(batch, 0xABCD, 8, 1, key=KEY)
    p = parse_frames_v3(data, np.array([0]), np.array([len(data)]), 8, 1, True)
    assert p.verdict == ("ok",) and (p.header["mean_change"] > 0).tolist() == [False]
    assert p.row_mean.tolist() == [1, -1] and p.row_count.tolist() == [0, 0]


def test_multi_channel_changes_follow_each_channel():
    # three channels in each of two windows: window 1's subframes predict from the same
    # channel three subframes back, not from the subframe just before (a change from the
    # previous subframe would cost zigzag(103 - 7) = 192: 15 bits instead of 5)
    q = np.zeros((6, 8), np.int64)
    q[3:, 0] = [1, 0, -2]
    mean = np.array([100, -50, 7, 103, -52, 9])
    batch = FrameBatchV3(
        multi=np.array([True]), channel=np.array([0]), sequence=np.array([0]),
        windows=np.array([2]), valid=np.array([8]), frame=np.zeros(6, np.int64),
        step_code=np.full(6, 512), mean=mean, q=q)
    data, length, sub_bits, _ = pack_frames_v3(batch, 0xABCD, 8, 3, key=KEY)
    # window 1: step change 0 (1 bit), mean changes +3, -2, +2 (5, 5, 5 bits: zigzag 6, 3, 4),
    # count changes +1, 0, +1 (3, 1, 3 bits); counted by hand from the exp-Golomb rule
    assert sub_bits[3:].tolist() == [1 + 5 + 3, 1 + 5 + 1, 1 + 5 + 3]
    p = parse_frames_v3(data, np.array([0]), length, 8, 3, True)
    assert p.verdict == ("ok",) and (p.header["mean_change"] > 0).tolist() == [True]
    assert p.row_mean.tolist() == mean.tolist() and p.q.tolist() == q.tolist()
    assert p.row_count.tolist() == [0, 0, 0, 1, 0, 1]


def _signal(n=3000, c=3, seed=0):
    return np.random.default_rng(seed).standard_normal((n, c)).cumsum(axis=0)


@pytest.mark.parametrize("kw", [dict(), dict(multi_channel_frames=True),
                                dict(windows_per_frame=1), dict(windows_per_frame=16),
                                dict(reference="total", frame_length=256),
                                dict(basis="haar", frame_length=32, fidelity=0.999)])
@pytest.mark.parametrize("version", [3, 5])  # 5 (the default) is 3 with prediction fields
def test_v3_round_trip_is_the_encoders_reconstruction(kw, version):
    x = _signal()
    enc = codec.encode(x, codec.Profile(layout_version=version, **kw))
    assert enc.data[2] >> 4 == version
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert np.array_equal(dec.samples, enc.reconstruction)
    assert_meets_target(x, dec.samples, enc.profile)  # recomputed, not the encoder's 'met'
    assert enc.report["bits_total"] == 8 * len(enc.data)
    assert 0 < enc.report["header_bits_per_sample"] < enc.report["bits_per_sample"]


@pytest.mark.parametrize("multi", [False, True])
def test_every_v3_frame_decodes_on_its_own(multi):
    x = _signal(1000)
    assert_frames_decode_alone(x, codec.encode(x, codec.Profile(
        layout_version=3, multi_channel_frames=multi, windows_per_frame=4)))


def test_corrupt_v3_frame_costs_only_its_windows():
    x = _signal()
    enc = codec.encode(x, codec.Profile(windows_per_frame=4, multi_channel_frames=False))
    loc = locate_frames(enc.data)
    bad = bytearray(enc.data)
    bad[int(loc.offsets[2]) + 9] ^= 0x10
    dec = codec.decode(bytes(bad), enc.profile, samples=x.shape[0])
    assert len(dec.crc_failures) == 1
    assert (~dec.delivered).sum() == 4 * 64  # one channel of four windows
    ok = dec.delivered
    assert np.array_equal(dec.samples[ok], enc.reconstruction[ok])


def test_a_frame_whose_coefficient_bytes_do_not_match_is_refused():
    # a trailing zero byte added to the coefficient bytes (CRC recomputed) is not a v3 frame
    data, *_ = pack_frames_v3(_example_batch(), 0xABCD, 8, 2, key=KEY)
    body = bytearray(data[:-2]) + b"\x00"
    body[3] += 1  # length 13 -> 14
    frame = with_crc(bytes(body), EXAMPLE_DIGEST)
    p = parse_frames_v3(frame, np.array([0]), np.array([14]), 8, 2, False)
    assert p.verdict != ("ok",)


def test_v2_then_v3_frames_decode_frame_by_frame():
    # every frame names its layout version: windows 0-23 in v2, then 24-46 in v3
    x = _signal()
    prof = codec.Profile()
    a = codec.encode(x[: 24 * 64], prof.model_copy(update={"layout_version": 2}))
    b = codec.encode(x[24 * 64 :], prof, first_window=24)
    dec = codec.decode(a.data + b.data, a.profile, samples=x.shape[0])
    assert dec.delivered.all()
    assert np.array_equal(dec.samples, np.concatenate([a.reconstruction, b.reconstruction]))


@pytest.mark.parametrize("multi", [False, True])
def test_streaming_decoder_reads_multi_window_frames_in_any_chunks(multi):
    # 700 windows of N = 2 in frames of 8 windows: sequence numbers (8 bits) wrap twice;
    # two frames swapped across the wrap, and the bytes fed in odd-sized chunks.
    x = np.stack([np.sin(np.arange(1400) * 0.01), np.cos(np.arange(1400) * 0.02)], axis=1)
    enc = codec.encode(x, codec.Profile(frame_length=2, fidelity=0.9, windows_per_frame=8,
                                        multi_channel_frames=multi))
    loc = locate_frames(enc.data)
    f = [enc.data[a : a + n] for a, n in zip(loc.offsets.tolist(), loc.lengths.tolist())]
    k = 256 // 8 * (1 if multi else 2)  # first frame of window 256
    f[k - 1], f[k] = f[k], f[k - 1]
    data = b"".join(f)
    sd = codec.StreamDecoder(enc.profile, samples=1400)
    blocks = []
    for a in range(0, len(data), 37):
        blocks += sd.feed(data[a : a + 37])
    blocks += sd.close()
    out = np.concatenate([b.samples for b in blocks])
    assert np.array_equal(out, enc.reconstruction)
    whole = codec.decode(data, enc.profile, samples=1400)
    assert whole.delivered.all() and np.array_equal(whole.samples, enc.reconstruction)


@pytest.mark.parametrize("version", [3, 5])
def test_stream_encoder_emits_v3_frames_that_decode(version):
    x = _signal(1000)
    prof = codec.Profile(layout_version=version)
    se = codec.StreamEncoder(prof, 3)
    data = b"".join(se.feed(x[a : a + 300]) for a in range(0, 1000, 300)) + se.close()
    assert data[2] >> 4 == version
    dec = codec.decode(data, se.profile, samples=1000)
    assert dec.delivered.all()
    assert_meets_target(x, dec.samples, se.profile)  # every budget, recomputed (verify.py)


def test_short_last_window_and_long_frames():
    x = np.random.default_rng(1).standard_normal((4096 * 2 + 100, 1))
    enc = codec.encode(x, codec.Profile(frame_length=4096, fidelity=0.9999, reference="total"))
    assert enc.data[2] & 0x08  # long-length flag set
    dec = codec.decode(enc.data, enc.profile)
    assert dec.samples.shape[0] == x.shape[0]
    assert np.array_equal(dec.samples, enc.reconstruction)


def test_more_windows_per_frame_spend_fewer_header_bits():
    x = _signal()
    one = codec.encode(x, codec.Profile(windows_per_frame=1))
    eight = codec.encode(x, codec.Profile(windows_per_frame=8))
    assert eight.report["header_bits_per_sample"] < one.report["header_bits_per_sample"]
    assert len(eight.data) < len(one.data)


@pytest.mark.parametrize("reference", ["ac", "total"])
@pytest.mark.parametrize("layout", [3, 4])
def test_a_frame_decodes_alone_as_in_its_batch(reference, layout):
    # The range decoder finishes its last few lanes one at a time in plain integers (the
    # whole decode of a frame that arrives alone): that path must read every model row the
    # batch path reads, coefficient 0 beside a mean included, so each frame of a real
    # stream decodes alone to exactly what the whole stream gives.
    x = motion("train")[:1024, :2]
    prof = codec.Profile(frame_length=32, windows_per_frame=4, reference=reference,
                         layout_version=layout)
    enc = codec.encode(x, prof)
    whole = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    loc = locate_frames(enc.data, codec.frame_key(enc.profile))
    assert loc.offsets.size > 8  # more lanes than the scalar path takes at once
    for o, n in zip(loc.offsets.tolist(), loc.lengths.tolist()):
        alone = codec.decode(enc.data[o : o + n], enc.profile, samples=x.shape[0],
                             strict=False)
        assert alone.counts["frames_ok"] == 1
        got = alone.delivered
        np.testing.assert_array_equal(alone.samples[got], whole.samples[got])


@pytest.mark.parametrize("layout", [3, 4])
def test_a_frame_of_silent_windows_decodes(layout):
    # A constant channel: every window codes count 0, so with count changes a later
    # subframe header is a few bits.  The parser's before-allocation size check
    # (FRAME_LAYOUT.md: the least bits a subframe header can take) must still admit
    # the frame, a short last window included (1000 = 15 x 64 + 40 samples).
    x = np.full((1000, 1), 5.0)
    prof = codec.Profile(frame_length=64, windows_per_frame=16, reference="ac",
                         layout_version=layout)
    enc = codec.encode(x, prof)
    dec = codec.decode(enc.data, enc.profile, samples=1000)
    assert dec.delivered.all() and dec.counts.get("frames_bad_header", 0) == 0
    np.testing.assert_allclose(dec.samples, x, rtol=0, atol=1e-9)
