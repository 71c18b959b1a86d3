"""Frame layout v1: the hand-computed example of FRAME_LAYOUT.md, and packer agreement."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from strategies import v1_frames
from streams import EXAMPLE_DIGEST, keyed_crc

from codec.layouts.envelope import FrameKey
from codec.layouts.v1 import (
    FrameBatch,
    pack_frame_reference,
    pack_frames,
    parse_headers,
    parse_payloads,
    unpack_frame_reference,
)

# Worked by hand in codec/FRAME_LAYOUT.md, field by field; the CRC bytes 8d 3b (profile
# digest 00 01 ... 1f) are rebuilt below with binascii and hashlib (streams.keyed_crc).
EXAMPLE = bytes.fromhex("e35a 10 0016 1234 01 0007 01 800004210008 64 0af8 8d3b")
KEY = FrameKey(EXAMPLE_DIGEST)


def test_example_crc_from_the_standard_library():
    assert keyed_crc(EXAMPLE[:-2], EXAMPLE_DIGEST) == 0x8D3B
FIELDS = dict(profile=0x1234, channel=1, sequence=7, basis=1, step_code=512, valid=8)


def _batch(channel, sequence, step, valid, mean, terms, index, value, has_mean=True):
    arr = lambda v: np.asarray(v, dtype=np.int64)  # noqa: E731
    return FrameBatch(channel=arr(channel), sequence=arr(sequence), basis=arr([1] * len(channel)),
                      step_code=arr(step), valid=arr(valid), has_mean=has_mean, mean=arr(mean),
                      terms=arr(terms), term_index=arr(index), term_value=arr(value))


def test_hand_computed_frame_bitstring_reference():
    assert pack_frame_reference(FIELDS, 100, [0, 3], [5, -2], n=8, key=KEY) == EXAMPLE
    head, mean, index, value = unpack_frame_reference(EXAMPLE, n=8, key=KEY)
    assert (mean, index, value) == (100, [0, 3], [5, -2])
    assert head["length"] == 22 and head["value_width"] == 4 and head["mean_width"] == 8


def test_hand_computed_frame_vectorized():
    data, lengths = pack_frames(_batch([1], [7], [512], [8], [100], [2], [0, 3], [5, -2]),
                                0x1234, 8, key=KEY)
    assert data == EXAMPLE and lengths.tolist() == [22]
    buf = np.frombuffer(data, np.uint8)
    head = parse_headers(buf, np.array([0]))
    assert {k: int(v[0]) for k, v in head.items()} | {} == {
        "version": 1, "flags": 0, "length": 22, "profile": 0x1234, "channel": 1, "sequence": 7,
        "basis": 1, "step_code": 512, "terms": 2, "value_width": 4, "mean_width": 8, "valid": 8}
    mean, index, value = parse_payloads(buf, np.array([0]), head, 8)
    assert mean.tolist() == [100] and index.tolist() == [0, 3] and value.tolist() == [5, -2]


@settings(max_examples=60, deadline=None)
@given(st.lists(v1_frames, min_size=1, max_size=6), st.booleans())
def test_vectorized_packer_agrees_with_bitstring(frames, has_mean):
    n = 16
    batch = _batch(
        [f[0] for f in frames], [f[1] for f in frames], [f[2] for f in frames],
        [f[3] for f in frames], [f[4] for f in frames], [len(f[5]) for f in frames],
        [i for f in frames for i in sorted(f[5])], [v for f in frames for v in f[6]], has_mean)
    data, lengths = pack_frames(batch, 0xBEEF, n, key=KEY)
    pos = 0
    for f, length in zip(frames, lengths):
        fields = dict(profile=0xBEEF, channel=f[0], sequence=f[1] % 65536, basis=1,
                      step_code=f[2], valid=f[3])
        ref = pack_frame_reference(fields, f[4] if has_mean else None, sorted(f[5]), f[6], n, KEY)
        assert data[pos : pos + length] == ref
        head, mean, index, value = unpack_frame_reference(ref, n, KEY)
        assert index == sorted(f[5]) and value == f[6]
        pos += length
    assert pos == len(data)
