"""Frame layout version 2: a hand-computed frame to the exact byte, and streams of both versions."""


import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from streams import EXAMPLE_DIGEST, assert_accounting, digest_of, with_crc

import codec
from codec import FrameError
from codec.layouts.envelope import FrameKey, frame_crc_ok, frame_extent
from codec.layouts.v2 import FrameBatchV2, pack_frames_v2, parse_frames_v2
from codec.stream.search import locate_frames


def Profile(**kw):  # noqa: N802  (these tests are about layout 2, which is no longer the default)
    return codec.Profile(**{"layout_version": 2, **kw})


# The frame of FRAME_LAYOUT.md, "Version 2 worked example", written out bit by bit
# by hand from the layout table: N = 8, reference total, profile id 0xABCD,
# window 5, channel 1, step code 512, coefficients q = [3, -1, 0, 0, 0, 0, 0, 0].
HAND_BITS = (
    "0010"            # version 2
    "0"               # long length field? no
    "00000001101"     # length: 13 bytes, sync marker to CRC
    "11001101"        # profile id, low byte of 0xABCD
    "00000101"        # sequence: window 5 mod 256
    "0"               # multi-channel frame? no
    "00000001"        # channel 1
    "0"               # short (last) window? no
    "1000000000"      # step code 512 (step 1.0)
    "0010"            # coded coefficients: 2 (bits for 0..8: 4)
    "00001"           # k_init = bit_length(3) - 1 = 1
    "011" "0"         # q0 = 3, k = 1: 3 >> 1 = 1 zero, a one, low bit 1; sign +
    "11" "1"          # q1 = -1: context 3 -> (11*3)>>4 = 2 -> k = 1: a one, low bit 1; sign -
    "0000"            # zero padding to the byte
)


def _hand_frame() -> bytes:
    body = int(HAND_BITS, 2).to_bytes(len(HAND_BITS) // 8, "big")
    # CRC-16/IBM-3740 over the implicit profile prefix, rebuilt with binascii and hashlib
    return with_crc(b"\xe3\x5a" + body, EXAMPLE_DIGEST)


KEY = FrameKey(EXAMPLE_DIGEST)


def _batch():
    q = np.zeros((1, 8), np.int64)
    q[0, :2] = [3, -1]
    return FrameBatchV2(multi=np.array([False]), channel=np.array([1]),
                        sequence=np.array([5]), valid=np.array([8]), frame=np.array([0]),
                        step_code=np.array([512]), mean=None, q=q)


def test_hand_computed_frame_packs_to_exact_bytes():
    assert len(HAND_BITS) == 72
    data, lengths, _, _ = pack_frames_v2(_batch(), 0xABCD, 8, key=KEY)
    assert data == _hand_frame()
    assert data.hex() == "e35a200dcd0500a0020b705473"  # the hex printed in FRAME_LAYOUT.md
    assert list(lengths) == [13]


def test_hand_computed_frame_parses_back():
    data = _hand_frame()
    mv = memoryview(data)
    assert frame_extent(mv, 0) == 13 and frame_crc_ok(mv, 0, 13, KEY)
    p = parse_frames_v2(data, np.array([0]), np.array([13]), 8, 4, False)
    assert p.verdict == ("ok",)
    assert p.header["profile"][0] == 0xCD and p.sequence[0] == 5 and p.row_channel[0] == 1
    assert p.row_step[0] == 512 and p.valid[0] == 8
    assert p.q[0].tolist() == [3, -1, 0, 0, 0, 0, 0, 0]


def _signal(n=3000, c=3, seed=0):
    rng = np.random.default_rng(seed)
    return rng.standard_normal((n, c)).cumsum(axis=0)


@pytest.mark.parametrize("kw", [dict(), dict(multi_channel_frames=True),
                                dict(reference="total", frame_length=256),
                                dict(basis="haar", frame_length=32, fidelity=0.999)])
def test_v2_round_trip_is_the_encoders_reconstruction(kw):
    x = _signal()
    enc = codec.encode(x, Profile(**kw))
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert np.array_equal(dec.samples, enc.reconstruction)
    assert enc.report["bits_total"] == 8 * len(enc.data)
    assert 0 < enc.report["header_bits_per_sample"] < enc.report["bits_per_sample"]


def test_multi_channel_frames_share_one_header():
    x = _signal()
    single = codec.encode(x, Profile())
    multi = codec.encode(x, Profile(multi_channel_frames=True))
    assert locate_frames(multi.data).offsets.size * 3 == locate_frames(single.data).offsets.size
    assert multi.report["header_bits_per_sample"] < single.report["header_bits_per_sample"]


def test_long_frames_use_the_long_length_field():
    x = np.random.default_rng(1).standard_normal((4096, 1))
    enc = codec.encode(x, Profile(frame_length=4096, fidelity=0.9999, reference="total"))
    assert len(enc.data) > 2047 and enc.data[2] & 0x08  # long-length flag set
    dec = codec.decode(enc.data, enc.profile)
    assert np.array_equal(dec.samples, enc.reconstruction)


def test_previous_layout_version_still_decodes():
    x = _signal()
    old = codec.encode(x, Profile(layout_version=1))
    assert old.data[2] >> 4 == 1
    dec = codec.decode(old.data, old.profile.model_copy(update={"layout_version": 2}),
                       samples=x.shape[0])
    assert np.array_equal(dec.samples, old.reconstruction)


def test_mixed_versions_decode_frame_by_frame():
    # Every frame names its layout version, so the (streaming) decoder reads a mix; the
    # second copy of each window here is another encoding of it: counted as a conflict.
    x = _signal()
    a = codec.encode(x, Profile(layout_version=1))
    b = codec.encode(x, Profile())
    dec = codec.decode(a.data + b.data, a.profile, samples=x.shape[0], reorder=10**6)
    assert np.array_equal(dec.samples, a.reconstruction)
    assert dec.counts["frames_conflict"] == len(locate_frames(b.data).offsets)
    half = codec.decode(a.data[: len(a.data) // 2] + b.data[len(b.data) // 2 :], a.profile,
                        samples=x.shape[0], strict=False)
    assert half.counts["samples_delivered"] > 0.8 * x.size  # v1 first half, v2 second half


def test_corrupt_v2_frame_costs_only_itself():
    x = _signal()
    enc = codec.encode(x, Profile())
    loc = locate_frames(enc.data)
    bad = bytearray(enc.data)
    bad[int(loc.offsets[5]) + 6] ^= 0x10
    dec = codec.decode(bytes(bad), enc.profile, samples=x.shape[0])
    assert len(dec.crc_failures) == 1
    assert (~dec.delivered).sum() == 64  # one channel of one window
    ok = dec.delivered
    assert np.array_equal(dec.samples[ok], enc.reconstruction[ok])


def test_other_profile_is_refused():
    x = _signal()
    enc = codec.encode(x, Profile())
    with pytest.raises(FrameError, match="another profile"):
        codec.decode(enc.data, enc.profile.model_copy(update={"fidelity": 0.5}))


def test_profile_identifier_unchanged_by_new_settings():
    # Identifiers computed by the v1-only code on main before this change
    # (regression values: frames written then must still be recognised).
    assert codec.profile_id(Profile()) == 0x7DFB
    spec = codec.ChannelSpec(name="a", resolution=0.01)
    assert codec.profile_id(Profile(channels=(spec,))) == 0xC469
    with_new = Profile(channels=(spec.model_copy(update={"max_error": 0.5}),),
                       multi_channel_frames=True, layout_version=1)
    assert codec.profile_id(with_new) == 0xC469


def test_layout_document_example_matches_the_packer():
    # FRAME_LAYOUT.md is the written layout; its v2 worked example must be what we pack
    # (the v1 example is checked in test_layout.py).
    from pathlib import Path

    doc = (Path(codec.__file__).parent / "FRAME_LAYOUT.md").read_text(encoding="utf-8")
    assert pack_frames_v2(_batch(), 0xABCD, 8, key=KEY)[0].hex() in doc


def _forge(payload: bytes, profile) -> bytes:
    """A v2 frame around arbitrary bytes with a correct length and CRC (a hostile sender
    who knows the profile)."""
    length = 2 + 2 + len(payload) + 2
    body = bytes([0x20 | (length >> 8), length & 0xFF]) + payload
    return with_crc(b"\xe3\x5a" + body, digest_of(profile))


_FORGE_X = np.cumsum(np.random.default_rng(4).normal(size=(64, 2)), axis=0)
_FORGE_ENC = codec.encode(_FORGE_X, Profile(frame_length=16))  # windows 0-3 of 8


@settings(max_examples=150, deadline=None)
@given(st.binary(min_size=1, max_size=120))
def test_forged_frames_are_refused_or_decoded_never_crash(payload):
    # A real stream for windows 0-3, then a forged frame (right profile byte, so the payload
    # parser itself faces the hostile bytes), decoded as a 128-sample stream.  Whatever the
    # forgery, the real frames must come out exactly (a decoder that refuses everything
    # fails here), every sample is accounted for, and a forged frame that is accepted
    # delivers finite values only where no real frame was.
    prof = _FORGE_ENC.profile
    data = _FORGE_ENC.data + _forge(bytes([codec.profile_id(prof) & 0xFF]) + payload, prof)
    dec = codec.decode(data, prof, samples=128, strict=False)
    assert_accounting(dec, 2)
    assert (dec.status[:64] == codec.DELIVERED).all()
    np.testing.assert_array_equal(dec.samples[:64], _FORGE_ENC.reconstruction)
    assert np.isfinite(dec.samples[dec.delivered]).all()
    forged_ok = dec.counts["frames_ok"] - 8  # 4 windows x 2 channels are real
    assert forged_ok in (0, 1)
    assert (dec.status[64:] == codec.DELIVERED).any() == bool(forged_ok)


def test_a_forged_copy_of_a_real_frame_is_accepted():
    # The forging helper itself is sound: a real frame's payload, moved to window 6 and
    # re-wrapped by _forge, decodes to that frame's values at window 6.
    loc = locate_frames(_FORGE_ENC.data)
    first = _FORGE_ENC.data[loc.offsets[0] : loc.offsets[0] + loc.lengths[0]]
    payload = bytearray(first[4:-2])
    payload[1] = 6  # the sequence byte (window 6)
    prof = _FORGE_ENC.profile
    dec = codec.decode(_FORGE_ENC.data + _forge(bytes(payload), prof), prof, samples=128)
    assert dec.counts["frames_ok"] == 9
    np.testing.assert_array_equal(dec.samples[96:112, 0], _FORGE_ENC.reconstruction[:16, 0])


@pytest.mark.parametrize("fidelity", [0.5, 0.95, 0.9999])
def test_rate_estimate_is_the_packed_size(fidelity):
    # the encoder's rate-fidelity choice counts bits with payload_bits_v2; it must be exact
    from codec.layouts.v2 import payload_bits_v2

    x = _signal(c=1)
    x[500] += 1e6  # a spike forces escapes
    n = 64
    cx = codec.as_basis("dct", n).analyze(x[: 46 * n, 0].reshape(-1, n))
    q = np.rint(cx / (np.abs(cx).max() * (1 - fidelity) + 1e-3)).astype(np.int64)
    nf = q.shape[0]
    batch = FrameBatchV2(multi=np.zeros(nf, bool), channel=np.zeros(nf, np.int64),
                         sequence=np.arange(nf), valid=np.full(nf, n), frame=np.arange(nf),
                         step_code=np.full(nf, 500), mean=None, q=q)
    _, _, sub_bits, _ = pack_frames_v2(batch, 1, n, key=KEY)
    assert np.array_equal(payload_bits_v2(q, None, n), sub_bits)


@pytest.mark.parametrize("multi", [False, True])
def test_every_frame_decodes_on_its_own(multi):
    x = _signal(n=700)
    enc = codec.encode(x, Profile(multi_channel_frames=multi))
    loc = locate_frames(enc.data)
    out = np.full(x.shape, np.nan)
    for o, n in zip(loc.offsets.tolist(), loc.lengths.tolist()):  # one frame at a time
        d = codec.decode(enc.data[o : o + n], enc.profile, samples=x.shape[0])
        out[d.delivered] = d.samples[d.delivered]
    # BLAS may round a one-row synthesis differently from a batch in the last bits
    np.testing.assert_allclose(out, enc.reconstruction, rtol=1e-12, atol=1e-12)
