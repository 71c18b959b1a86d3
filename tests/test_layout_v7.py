"""Frame layout version 7 (a count-free frame flag, a range-coded string per channel): the
worked example of FRAME_LAYOUT.md, the flag's choice against the coder's own code lengths,
round trips of real recordings, hostile string fields."""

import dataclasses

import numpy as np
import pytest
from checks import (
    assert_frames_decode_alone,
    assert_header_flips_never_crash,
    assert_meets_target,
)
from realdata import motion, vega_csv
from scipy.fft import idct
from streams import EXAMPLE_DIGEST, with_crc

import codec
from codec.encoder import reconstruct
from codec.entropy.rangecoder import coefficient_cost_bits, zero_tail_bits
from codec.layouts.envelope import FrameKey
from codec.layouts.v3 import FrameBatchV3, pack_frames_v3, parse_frames_v3
from codec.quantize.steps import step_from_code
from codec.stream.search import locate_frames

KEY = FrameKey(EXAMPLE_DIGEST)  # as tests/test_layout_v3.py: digest 00 01 ... 1f

# FRAME_LAYOUT.md, "Version 7 worked example": N = 8, reference total, two channels,
# profile id 0xABCD, the DCT (so the basis bit is sent), one window from sequence 5,
# multi = 1; channel 0: step code 512, q = [3, -1, 0, ...]; channel 1: step code 512, all
# zero.  Written out by hand from the layout tables: 38 header bits, channel 0's subframe
# (step, all_terms 0, L = 2, basis, string length 2 in 11 bits), channel 1's (step change
# 0, all_terms 0, L = 0, basis; no string field: the last channel), no padding.
HEADER7_BITS = (
    "0111" "0" "00000001111" "11001101" "00000101" "0000" "1" "0"
    "1000000000" "0" "0010" "0" "00000000010"
    "1" "0" "0000" "0"
)
STRING0 = bytes.fromhex("0a45")  # the first version-3 example's bytes: the same integers
EXAMPLE7 = bytes.fromhex("e35a") + int(HEADER7_BITS, 2).to_bytes(9, "big") + STRING0
STRING_AT = 38 + 10 + 1 + 4 + 1  # bit of channel 0's string field after the sync marker


def _example_batch():
    q = np.zeros((2, 8), np.int64)
    q[0, :2] = [3, -1]
    return FrameBatchV3(
        multi=np.array([True]), channel=np.array([0]), sequence=np.array([5]),
        windows=np.array([1]), valid=np.array([8]), frame=np.array([0, 0]),
        step_code=np.array([512, 512]), mean=None, q=q, lag=np.array([0, 0]),
        alternate=np.array([False, False]))


def _parse(data, channels=2, n=8, has_mean=False):
    return parse_frames_v3(data, np.array([0]), np.array([len(data)]), n, channels, has_mean,
                           version=7, switch=True)


def test_worked_example_packs_to_the_documented_bytes():
    # CRC-16/IBM-3740 over the implicit prefix SHA-256(D || 00 00 00 0f), rebuilt by the
    # catalogue implementation of tests/crcref.py (check value 0x29B1) and hashlib
    want = with_crc(EXAMPLE7, EXAMPLE_DIGEST)
    assert want.hex() == "e35a700fcd050a001001400a4572e7"
    data, length, sub_bits, lane = pack_frames_v3(_example_batch(), 0xABCD, 8, 2, version=7,
                                                  key=KEY)
    assert data == want and length.tolist() == [15] and lane.tolist() == [2]
    assert sub_bits.tolist() == [10 + 1 + 4 + 1 + 11, 1 + 1 + 4 + 1]


def test_worked_example_parses_and_decodes():
    p = _parse(with_crc(EXAMPLE7, EXAMPLE_DIGEST))
    assert p.verdict == ("ok",) and p.row_all_terms.tolist() == [False, False]
    assert p.q.tolist() == [[3, -1, 0, 0, 0, 0, 0, 0], [0] * 8]
    assert p.row_channel.tolist() == [0, 1] and p.row_count.tolist() == [2, 0]
    # outside the codec: SciPy's orthonormal DCT-III of the levels (step code 512: step 1)
    assert float(step_from_code(512)) == 1.0
    got = reconstruct(p.q, p.row_mean, p.row_step, codec.as_basis("dct", 8))
    np.testing.assert_allclose(got[0], idct(np.array([3.0, -1, 0, 0, 0, 0, 0, 0]),
                                            norm="ortho"), atol=1e-12)
    assert not got[1].any()


def test_a_string_length_past_the_bytes_is_refused():
    # channel 0's string said to be 3 bytes (only 2 follow the padding), CRC rebuilt
    body = bytearray(EXAMPLE7)
    bits = int.from_bytes(body[2:11], "big")
    bits ^= (2 ^ 3) << (72 - STRING_AT - 11)
    body[2:11] = bits.to_bytes(9, "big")
    assert _parse(with_crc(bytes(body), EXAMPLE_DIGEST)).verdict == ("bad_header",)
    # 1 byte: channel 0's string is cut and channel 1's gains a byte it does not use
    body[2:11] = (int.from_bytes(EXAMPLE7[2:11], "big") ^ ((2 ^ 1) << (72 - STRING_AT - 11))
                  ).to_bytes(9, "big")
    assert _parse(with_crc(bytes(body), EXAMPLE_DIGEST)).verdict == ("bad_header",)


def _counts_reference(q, count, frame, channel, per_win, n, has_mean):
    """Per row's (frame, channel) block: the block's count fields' bits as sent (whole, or
    as changes where cheaper) and the cost of coding every coefficient, from
    coefficient_cost_bits (the slow whole-matrix path) rather than zero_tail_bits."""
    from codec.entropy.rice import exp_golomb_bits, zigzag

    tails = (coefficient_cost_bits(q, np.full(count.size, n), mean=has_mean)
             - coefficient_cost_bits(q, count, mean=has_mean))
    first = np.flatnonzero(np.r_[True, frame[1:] != frame[:-1]])
    pos = np.arange(frame.size) - first[frame]
    later = pos >= per_win
    prev = np.where(later, np.arange(frame.size) - per_win, 0)
    change = np.where(later, exp_golomb_bits(zigzag(count - count[prev])), n.bit_length())
    block = np.unique(frame * (int(channel.max()) + 1) + channel, return_inverse=True)[1]
    fields = np.minimum(np.bincount(block, change), np.bincount(block) * n.bit_length())
    return fields[block], np.bincount(block, tails)[block]


def test_zero_tails_match_the_whole_cost_of_the_coder():
    rng = np.random.default_rng(2)
    for n in (8, 64, 256):
        q = np.round(rng.laplace(0, 4, (400, n)) * np.exp(-np.arange(n) / (n / 5)))
        q = q.astype(np.int64)
        count = np.where((q != 0).any(1), n - np.argmax((q != 0)[:, ::-1], axis=1), 0)
        for mean in (False, True):
            want = (coefficient_cost_bits(q, np.full(400, n), mean=mean)
                    - coefficient_cost_bits(q, count, mean=mean))
            np.testing.assert_allclose(zero_tail_bits(q, count, mean), want, atol=1e-9)


def _weather():
    # vega_datasets' seattle-weather.csv (NOAA, public domain): precipitation, maximum and
    # minimum temperature, wind; 1461 days
    return vega_csv("seattle-weather", (1, 2, 3, 4))


@pytest.mark.parametrize("source, multi", [("weather", False), ("weather", True),
                                           ("motion", False), ("motion", True)])
def test_the_flag_is_set_where_counts_cost_more_than_the_zeros(source, multi):
    x = _weather() if source == "weather" else motion()[:4000]
    ch = x.shape[1]
    prof = codec.Profile(frame_length=64, layout_version=7, multi_channel_frames=multi)
    enc = codec.encode(x, prof)
    loc = locate_frames(enc.data)
    p = parse_frames_v3(enc.data, loc.offsets, loc.lengths, 64, ch, True, version=7, switch=True)
    assert set(p.verdict) == {"ok"}
    flag = p.row_all_terms  # per row, alike for a channel's rows in a frame
    assert flag.any()
    if source == "motion":
        assert not flag.all()  # here some channels keep their counts
    assert (p.row_count[flag] == 64).all()
    # the counts the channel would send: the last non-zero plus one
    nz = p.q != 0
    count = np.where(nz.any(1), 64 - np.argmax(nz[:, ::-1], axis=1), 0)
    fields, tails = _counts_reference(p.q, count, p.row_frame, p.row_channel,
                                      ch if multi else 1, 64, True)
    # (no channel here comes near the one-byte-per-subframe rule, which would keep counts)
    assert np.array_equal(flag, tails < fields)
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert dec.delivered.all() and np.array_equal(dec.samples, enc.reconstruction)
    assert_meets_target(x, dec.samples, enc.profile)
    # shorter than layout 6's single-channel frames (the default before layout 7); against
    # layout 6's multi-channel frames (one string each) the string lengths and ends can
    # cost more than the flag saves: on the accelerograph record they do
    v6 = codec.encode(x, prof.model_copy(update={"layout_version": 6,
                                                 "multi_channel_frames": False}))
    assert len(enc.data) < len(v6.data)


def test_multi_channel_frames_carry_one_string_per_channel():
    # the accelerograph record shipped in obspy (6 channels, counts); a short last window
    x = motion()[: 64 * 40 + 29]
    prof = codec.Profile(frame_length=64, layout_version=7, multi_channel_frames=True)
    enc = codec.encode(x, prof)
    loc = locate_frames(enc.data)
    p = parse_frames_v3(enc.data, loc.offsets, loc.lengths, 64, 6, True, version=7, switch=True)
    assert set(p.verdict) == {"ok"} and (p.header["multi"] == 1).all()
    # the frame decodes as the six single-channel frames of the same integers would
    single = codec.encode(x, prof.model_copy(update={"multi_channel_frames": False}))
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert dec.delivered.all() and np.array_equal(dec.samples, enc.reconstruction)
    assert np.array_equal(dec.samples, single.reconstruction)
    assert len(enc.data) < len(single.data)
    sd = codec.StreamDecoder(enc.profile, samples=x.shape[0])  # bytes in odd-sized chunks
    blocks = [b for a in range(0, len(enc.data), 53) for b in sd.feed(enc.data[a : a + 53])]
    assert np.array_equal(np.concatenate([b.samples for b in blocks + sd.close()]),
                          enc.reconstruction)


@pytest.mark.parametrize("multi", [False, True])
def test_every_v7_frame_decodes_on_its_own(multi):
    x = _weather()[:64 * 12]
    assert_frames_decode_alone(x, codec.encode(x, codec.Profile(
        frame_length=64, layout_version=7, windows_per_frame=4, multi_channel_frames=multi)))


def test_an_all_terms_frame_with_fewer_bytes_than_subframes_is_refused():
    # Written by hand from the layout tables: N = 8, reference total, one channel, two
    # windows, count_change 0, predict 0, one_step 1; subframe 0: step 512, all_terms 1
    # (no count field) and the basis bit, subframe 1: nothing (one step, the channel's
    # flag, no basis field); no coefficient bytes.  Every count is then N: 16
    # coefficients decoded from 0 bytes, which the rule refuses.
    bits = ("0111" "0" "00000001011" "11001101" "00000000" "0001" "0" "0" "0" "0" "1"
            "1000000000" "1" "0")
    bits += "0" * (-len(bits) % 8)
    frame = with_crc(bytes.fromhex("e35a") + int(bits, 2).to_bytes(len(bits) // 8, "big"),
                     EXAMPLE_DIGEST)
    assert len(frame) == 11
    assert _parse(frame, channels=1).verdict == ("bad_header",)
    # the packer keeps the counts of such a batch instead
    batch = FrameBatchV3(
        multi=np.array([False]), channel=np.array([0]), sequence=np.array([0]),
        windows=np.array([2]), valid=np.array([8]), frame=np.array([0, 0]),
        step_code=np.array([512, 512]), mean=None, q=np.zeros((2, 8), np.int64),
        lag=np.array([0, 0]), alternate=np.array([False, False]))
    data, *_ = pack_frames_v3(batch, 0xABCD, 8, 1, version=7, key=KEY)
    p = _parse(data, channels=1)
    assert p.verdict == ("ok",) and p.row_all_terms.tolist() == [False, False]


def test_hostile_header_bits_never_crash_the_decoder():
    # every bit of a real multi-channel frame's header and string fields flipped, CRC
    # rebuilt: the decoder refuses the frame or decodes it, never raises
    x = _weather()[:64 * 4]
    enc = codec.encode(x, codec.Profile(frame_length=64, layout_version=7, windows_per_frame=4,
                                        multi_channel_frames=True))
    assert_header_flips_never_crash(enc, x.shape[0], 60)


def test_without_an_alternate_and_in_one_channel_the_frame_is_version_6s_but_the_flag():
    batch = dataclasses.replace(_example_batch(), multi=np.array([False]),
                                channel=np.array([0]), frame=np.array([0, 0]),
                                windows=np.array([2]), alternate=None)
    v7, *_ = pack_frames_v3(batch, 0xABCD, 8, 1, version=7, key=KEY)
    v6, *_ = pack_frames_v3(batch, 0xABCD, 8, 1, version=6, key=KEY)
    p7 = _parse(v7, channels=1)
    assert p7.verdict == ("ok",) and p7.row_all_terms.tolist() == [False, False]
    assert p7.q.tolist() == parse_frames_v3(v6, np.array([0]), np.array([len(v6)]), 8, 1, False,
                                            version=6).q.tolist()
