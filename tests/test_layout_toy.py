"""A layout added by a test: one class and one ``register_layout`` call, and the round-trip
property test runs it like a built-in layout (issue 14: layouts as registered units).

The toy layout sends every code in a fixed 56-bit two's complement field: no
entropy coding, so its bytes are checked below with plain Python integers.
"""

import numpy as np
import pytest
import scipy.fft
import test_roundtrip
from checks import assert_roundtrip, registered_layouts
from streams import keyed_crc

import codec
from codec.entropy.bits import from_twos, pack_fields, read_fields, to_twos
from codec.layouts.envelope import CRC_BYTES, SYNC, wrap_frames
from codec.layouts.fields import header_slots, read_header
from codec.layouts.registry import (
    LengthField,
    PackedFrames,
    ParsedFrames,
    Verdicts,
    layout_for,
    register_layout,
    unregister_layout,
)
from codec.quantize.select import choose_steps

TOY_VERSION = 9
VALUE_BITS = 56  # codes stay below 2**52 (the encoder's finest step), so 56 bits hold any
TOY_FIELDS = (
    ("version", 4, "9"), ("flags", 4, "0"), ("length", 16, "bytes, sync to CRC"),
    ("profile", 16, "profile identifier"), ("sequence", 16, "window modulo 65536"),
    ("channel", 8, "channel index"), ("step_code", 10, "step code"),
    ("valid", 14, "real samples of the window"),
)
HEAD_BYTES = sum(b for _, b, _ in TOY_FIELDS) // 8


class _Reader:
    def __init__(self, buf):
        self.buf = buf

    def read(self, pos, width):
        return read_fields(self.buf, pos, width).astype(np.int64)


def _frame_bytes(n: int) -> int:
    return len(SYNC) + HEAD_BYTES + VALUE_BITS // 8 * (n + 1) + CRC_BYTES


class ToyLayout:
    """One window of one channel per frame: a fixed header, the mean and N codes of 56 bits."""

    version = TOY_VERSION
    sequence_bits = 16
    length_field = LengthField("fixed16", _frame_bytes(2))
    supports_frame_scope = False
    has_trellis = False
    spends_slack = False

    def __init__(self):
        self.packed = self.parsed = 0  # frames through each half: the round trips used it

    def windows_per_frame(self, profile):
        return 1

    def max_frame_bytes(self, profile):
        return _frame_bytes(profile.frame_length)

    def choose_codes(self, cx, mean, dc, budget, n):
        return choose_steps(cx, mean, dc, budget), np.full(cx.shape[0], 0.5)

    def block_offset(self):
        return 0.5

    def pack(self, c, key):
        nf, n = c.q.shape
        length = _frame_bytes(n)
        fields = dict(version=TOY_VERSION, flags=0, length=length, profile=c.profile_id,
                      sequence=c.sequence % 65536, channel=c.channel, step_code=c.step_code,
                      valid=c.valid)
        slots = header_slots(TOY_FIELDS, fields, None, nf)
        mean = np.zeros(nf, np.int64) if c.mean is None else c.mean
        values = np.concatenate([np.stack([v for v, _ in slots], 1).astype(np.uint64),
                                 to_twos(np.c_[mean, c.q], VALUE_BITS)], axis=1)
        widths = np.concatenate([np.stack([w for _, w in slots], 1),
                                 np.full((nf, n + 1), VALUE_BITS)], axis=1)
        body = pack_fields(values.ravel(), widths.ravel())
        data = wrap_frames(body, np.full(nf, length - len(SYNC) - CRC_BYTES), key).tobytes()
        self.packed += nf
        return PackedFrames(data, np.full(nf, 8 * length), nf * 8 * (length - 7 * n),
                            np.arange(nf))

    def parse(self, data, offsets, lengths, ctx):
        buf, nf, n = np.frombuffer(data, np.uint8), offsets.size, ctx.n
        h, pos = read_header(_Reader(buf), offsets * 8 + 8 * len(SYNC), TOY_FIELDS)
        v = Verdicts(nf)
        v.refuse(h["profile"] != ctx.profile_id, "foreign_profile", "made under another profile")
        v.refuse((h["length"] != lengths) | (lengths != _frame_bytes(n)), "bad_header",
                 "length does not match the frame length")
        v.refuse((h["channel"] >= ctx.channels) | (h["valid"] < 1) | (h["valid"] > n),
                 "bad_header", "channel or valid samples outside the profile")
        vals = np.zeros((nf, n + 1), np.int64)
        good = np.flatnonzero(v.ok)
        if good.size:
            at = pos[good][:, None] + VALUE_BITS * np.arange(n + 1)
            raw = read_fields(buf, at.ravel(), np.full(at.size, VALUE_BITS))
            vals[good] = from_twos(raw, VALUE_BITS).reshape(good.size, n + 1)
        self.parsed += nf
        zeros = np.zeros(nf, np.int64)
        return ParsedFrames(tuple(v.verdict), tuple(v.detail), h["sequence"], h["valid"],
                            (vals[:, 1:] != 0).sum(axis=1), h["step_code"], h, np.arange(nf),
                            h["channel"], zeros, h["valid"], h["step_code"],
                            vals[:, 0] if ctx.has_mean else None, np.full(nf, n),
                            np.zeros(nf, bool), vals[:, 1:])


@pytest.fixture
def toy():
    layout = register_layout(ToyLayout())
    yield layout
    unregister_layout(TOY_VERSION)


def test_round_trip_property_picks_up_a_registered_layout(toy):
    assert TOY_VERSION in registered_layouts()
    # the property test of test_roundtrip.py, as it runs in the suite: every registered layout
    test_roundtrip.test_roundtrip_arbitrary_values()
    assert toy.packed > 0 and toy.parsed > 0


def test_toy_frames_hold_the_codes_and_the_crc(toy):
    rng = np.random.default_rng(4)
    x = np.cumsum(rng.normal(size=(100, 2)), axis=0)
    profile = codec.Profile(frame_length=16, layout_version=TOY_VERSION)
    enc, dec = assert_roundtrip(profile, x, layouts=[TOY_VERSION])
    frame = enc.data[: _frame_bytes(16)]
    # Outside the codec: the CRC by the catalogue implementation (tests/streams.py), and the
    # header and first code read with Python integer arithmetic from the table above.
    assert keyed_crc(frame[:-2], codec.frame_key(enc.profile).digest) == int.from_bytes(
        frame[-2:], "big")
    bits = int.from_bytes(frame[2:-2], "big")
    total = 8 * (len(frame) - 4)

    def field(start, width, signed=False):
        v = (bits >> (total - start - width)) & ((1 << width) - 1)
        return v - ((v >> (width - 1)) << width) if signed else v

    assert field(0, 4) == TOY_VERSION and field(8, 16) == len(frame)
    step = 2.0 ** ((field(64, 10) - 512) / 8)  # FRAME_LAYOUT.md: step = 2^((code - 512) / 8)
    mean = field(88, VALUE_BITS, signed=True)
    q = np.array([field(88 + VALUE_BITS * (j + 1), VALUE_BITS, signed=True) for j in range(16)])
    # The first window of channel 0, synthesized by scipy's orthonormal DCT-III (the inverse
    # of the DCT-II basis) from the codes read above, is what the encoder reconstructed.
    expect = scipy.fft.idct(q * step, norm="ortho") + mean * step / np.sqrt(16)
    assert np.allclose(enc.reconstruction[:16, 0], expect, rtol=0, atol=1e-9 * np.abs(x).max())
    assert enc.report["frames_on_wire"] == 2 * 7 and dec.delivered.all()


def test_an_unregistered_layout_is_gone(toy):
    x = np.random.default_rng(1).normal(size=(64, 1))
    profile = codec.Profile(frame_length=16, layout_version=TOY_VERSION)
    enc = codec.encode(x, profile)
    unregister_layout(TOY_VERSION)
    try:
        with pytest.raises(codec.FrameError, match="no frame"):  # no length rule for them now
            codec.decode(enc.data, enc.profile.model_copy(update={"layout_version": 1}))
        with pytest.raises(ValueError, match="unknown frame layout"):
            codec.Profile(layout_version=TOY_VERSION)
    finally:
        register_layout(toy)
    assert layout_for(TOY_VERSION) is toy


@pytest.mark.parametrize("version", [0, 15, 16, 3])
def test_register_refuses_a_taken_or_impossible_version(version):
    bad = ToyLayout()
    bad.version = version
    with pytest.raises(ValueError):
        register_layout(bad)
    assert layout_for(3).version == 3  # the built-in layout is untouched
