"""Frame layout version 6 (a basis switch per channel and frame): the worked example of
FRAME_LAYOUT.md against PyWavelets and SciPy, round trips of bursty signals, hostile bits."""

import dataclasses

import numpy as np
import pytest
import pywt
from checks import (
    assert_frames_decode_alone,
    assert_header_flips_never_crash,
    assert_meets_target,
)
from scipy.fft import idct
from streams import EXAMPLE_DIGEST, digest_of, with_crc

import codec
from codec.encoder import reconstruct
from codec.layouts.envelope import FrameKey
from codec.layouts.v3 import FrameBatchV3, pack_frames_v3, parse_frames_v3
from codec.stream.search import locate_frames

KEY = FrameKey(EXAMPLE_DIGEST)  # as tests/test_layout_v3.py: digest 00 01 ... 1f

# FRAME_LAYOUT.md, "Version 6 worked example": the batch of the version-5 example
# (N = 8, reference ac, one channel, profile id 0xABCD, two windows from sequence 5, step
# code 512; window 0: mean code 100, q = [0, 4, -2, 1, 0, 0, 0, 0]; window 1: mean code 0,
# every coefficient 0) with no prediction and the channel on the alternate basis (Haar).
# Header and subframe bits written out by hand from the layout tables: predict 0 (no lag
# field), one_step 1, mean order 0, the basis bit (1) at the end of window 0's subframe
# header only; 81 bits, 7 of padding.
HEADER6_BITS = (
    "0110" "0" "00000010010" "11001101" "00000101" "0001" "0" "0" "0" "0" "0" "1" "0000"
    "1000000000" "000000011001001" "0100" "1"
    "1" "0000" "0000000"
)
LANE = bytes.fromhex("df1f8f")  # window 0's coefficients: as layouts 3 and 5 code them
EXAMPLE6 = bytes.fromhex("e35a") + int(HEADER6_BITS, 2).to_bytes(11, "big") + LANE
Q0 = [0, 4, -2, 1, 0, 0, 0, 0]
SWITCH_AT = 46 + 10 + 15 + 4  # bit of the basis field after the sync marker
DCT8 = codec.as_basis("dct", 8)


def _example_batch(alternate=(True, True)):
    q = np.zeros((2, 8), np.int64)
    q[0] = Q0
    return FrameBatchV3(
        multi=np.array([False]), channel=np.array([0]), sequence=np.array([5]),
        windows=np.array([2]), valid=np.array([8]), frame=np.array([0, 0]),
        step_code=np.array([512, 512]), mean=np.array([100, 0]), q=q,
        lag=np.array([0, 0]), alternate=np.array(alternate))


def _parse(data, switch=True):
    return parse_frames_v3(data, np.array([0]), np.array([len(data)]), 8, 1, True, version=6,
                           switch=switch)


def _decode(data):
    p = _parse(data)
    assert p.verdict == ("ok",)
    return reconstruct(p.q, p.row_mean, p.row_step, DCT8, alternate=p.row_alternate)


def test_worked_example_packs_to_the_documented_bytes():
    # CRC-16/IBM-3740 over the implicit prefix SHA-256(D || 00 00 00 12), rebuilt by the
    # catalogue implementation of tests/crcref.py (check value 0x29B1) and hashlib
    want = with_crc(EXAMPLE6, EXAMPLE_DIGEST)
    assert want.hex() == "e35a6012cd0510420001929800df1f8f7fe0"
    data, length, sub_bits, lane = pack_frames_v3(_example_batch(), 0xABCD, 8, 1, version=6,
                                                  key=KEY)
    assert data == want and length.tolist() == [18] and lane.tolist() == [3]
    assert sub_bits.tolist() == [10 + 15 + 4 + 1, 1 + 4]  # the bit in window 0 only


def test_worked_example_parses_and_decodes_on_the_haar_basis():
    p = _parse(with_crc(EXAMPLE6, EXAMPLE_DIGEST))
    assert p.verdict == ("ok",) and p.row_alternate.tolist() == [True, True]
    assert p.q.tolist() == [Q0, [0] * 8] and p.row_lag.tolist() == [0, 0]
    # outside the codec: PyWavelets' full-depth inverse Haar transform (orthonormal filter,
    # periodization) of the coefficients in coarse-to-fine order, plus the mean 100 / sqrt(8)
    q = np.array(Q0, float)
    x0 = pywt.waverec([q[:1], q[1:2], q[2:4], q[4:]], "haar", mode="periodization")
    want = np.stack([x0 + 100 / np.sqrt(8), np.zeros(8)])
    np.testing.assert_allclose(_decode(with_crc(EXAMPLE6, EXAMPLE_DIGEST)), want, atol=1e-12)


def test_the_basis_bit_chooses_the_synthesis():
    # the same frame with the bit cleared decodes on the DCT (SciPy's orthonormal DCT-III)
    body = bytearray(EXAMPLE6)
    byte, bit = divmod(16 + SWITCH_AT, 8)
    body[byte] &= ~(0x80 >> bit) & 0xFF
    got = _decode(with_crc(bytes(body), EXAMPLE_DIGEST))
    np.testing.assert_allclose(got[0], idct(np.array(Q0, float), norm="ortho")
                               + 100 / np.sqrt(8), atol=1e-12)
    packed, *_ = pack_frames_v3(_example_batch((False, False)), 0xABCD, 8, 1, version=6, key=KEY)
    assert packed == with_crc(bytes(body), EXAMPLE_DIGEST)


def test_without_an_alternate_the_frame_is_version_5s():
    # a profile basis with no alternate (not the DCT, or N not a power of two): no field,
    # and the frame is layout 5's bit for bit but the version
    batch = dataclasses.replace(_example_batch(), alternate=None)
    v6, *_ = pack_frames_v3(batch, 0xABCD, 8, 1, version=6, key=KEY)
    v5, *_ = pack_frames_v3(batch, 0xABCD, 8, 1, version=5, key=KEY)
    assert v6[3:-2] == v5[3:-2] and v6[2] == 0x60 | (v5[2] & 0x0F)
    assert _parse(v6, switch=False).row_alternate is None


def test_a_channel_on_two_bases_in_one_frame_is_not_packed():
    with pytest.raises(RuntimeError):
        pack_frames_v3(_example_batch((True, False)), 0xABCD, 8, 1, version=6, key=KEY)


def _bursty(samples, channels, seed):
    """Rain-gauge-like channels: mostly zero, with rare bursts of a few samples."""
    rng = np.random.default_rng(seed)
    x = np.zeros((samples, channels))
    for c in range(channels):
        for start in rng.choice(samples - 4, size=samples // 40, replace=False):
            x[start : start + rng.integers(1, 4), c] = rng.exponential(5.0)
    return np.round(x, 1)


def _row_alternate(enc):
    loc = locate_frames(enc.data)
    p = parse_frames_v3(enc.data, loc.offsets, loc.lengths, enc.profile.frame_length,
                        len(enc.profile.channels), True, version=6, switch=True)
    assert set(p.verdict) == {"ok"}
    return p


@pytest.mark.parametrize("multi", [False, True])
def test_bursty_signal_round_trip_uses_the_alternate_basis(multi):
    x = _bursty(64 * 40 + 37, 2, seed=3)  # a short last window of 37
    x[:, 1] += 3 * np.sin(2 * np.pi * np.arange(x.shape[0]) / 24)  # periodic: DCT, predicted
    prof = codec.Profile(frame_length=64, layout_version=6, multi_channel_frames=multi)
    enc = codec.encode(x, prof)
    assert enc.data[2] >> 4 == 6
    p = _row_alternate(enc)
    assert p.row_alternate[p.row_channel == 0].any()  # the bursts go to the Haar basis
    assert not (p.row_alternate & (p.row_lag > 0)).any()  # never predicted on it
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert dec.delivered.all() and np.array_equal(dec.samples, enc.reconstruction)
    assert_meets_target(x, dec.samples, enc.profile)  # recomputed from the decoded samples
    plain = codec.encode(x, prof.model_copy(update={"layout_version": 5}))
    assert len(enc.data) < len(plain.data)
    sd = codec.StreamDecoder(enc.profile, samples=x.shape[0])  # bytes in odd-sized chunks
    blocks = [b for a in range(0, len(enc.data), 37) for b in sd.feed(enc.data[a : a + 37])]
    assert np.array_equal(np.concatenate([b.samples for b in blocks + sd.close()]),
                          enc.reconstruction)


def test_every_v6_frame_decodes_on_its_own():
    x = _bursty(64 * 12, 2, seed=5)
    assert_frames_decode_alone(x, codec.encode(x, codec.Profile(
        frame_length=64, layout_version=6, windows_per_frame=4)))


def test_hostile_header_bits_never_crash_the_decoder():
    # every single bit of a real layout-6 frame's header flipped, CRC rebuilt: the decoder
    # refuses the frame or decodes it, never raises
    x = _bursty(64 * 4, 2, seed=3)
    enc = codec.encode(x, codec.Profile(frame_length=64, layout_version=6, windows_per_frame=4,
                                        multi_channel_frames=True))
    assert _row_alternate(enc).row_alternate.any()
    assert_header_flips_never_crash(enc, x.shape[0], 40)


def test_a_foreign_frame_in_the_batch_leaves_the_basis_of_the_others():
    # Found by tools/fuzz_mutations.py: frames whose profile byte is another profile's are
    # set aside before parsing, and the rows of the others were rebuilt without their
    # basis field, so a Haar frame batched with one decoded on the DCT.  Each frame must
    # decode alike alone and beside a CRC-valid frame that names another profile.
    x = _bursty(64 * 8, 1, seed=3)
    enc = codec.encode(x, codec.Profile(frame_length=64, layout_version=6, windows_per_frame=4))
    assert _row_alternate(enc).row_alternate.any()
    digest = digest_of(enc.profile)
    frame = enc.data[: locate_frames(enc.data).lengths[0]]
    body = bytearray(frame[:-2])
    body[4] ^= 0xFF  # the profile byte (short length field): another profile's
    foreign = with_crc(bytes(body), digest)
    alone = codec.decode(frame, enc.profile, strict=False)
    both = codec.decode(foreign + frame, enc.profile, strict=False)
    assert both.counts["frames_foreign_profile"] == 1
    ok = alone.delivered
    assert ok.any() and np.array_equal(both.samples[ok], alone.samples[ok])
    assert np.array_equal(alone.samples[ok], enc.reconstruction[: ok.shape[0]][ok])
