"""Bit I/O, Rice and exp-Golomb codes: hand-computed codewords, exhaustive and property checks.

Every check goes through the functions the frame layouts use (``pack_fields``,
``BitReader``, ``rice_escape_fields``, ``read_rice_escape``, ``exp_golomb_bits``,
``read_exp_golomb``) against bit strings built in plain Python from the
published definitions.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from codec.entropy.bits import BitReader, bit_length, pack_fields, read_fields
from codec.entropy.rice import (
    ESCAPE_BITS,
    RICE_ESCAPE,
    exp_golomb_bits,
    read_exp_golomb,
    read_rice_escape,
    rice_escape_bits,
    rice_escape_fields,
    rice_k_from_context,
    unzigzag,
    zigzag,
)


def bits_of(values, widths) -> str:
    """The packed fields as a string of 0/1 (independent of the packer: plain Python)."""
    return "".join(format(int(v), f"0{int(w)}b")[-int(w):] if w else ""
                   for v, w in zip(values, widths))


def bytes_of(bits: str) -> np.ndarray:
    """A string of 0/1 as bytes, MSB first, zero-padded (plain Python, no project code)."""
    bits += "0" * (-len(bits) % 8)
    return np.array([int(bits[i : i + 8], 2) for i in range(0, len(bits), 8)], dtype=np.uint8)


def rice_items(mag, k):
    """The layout's Rice codewords as interleaved (value, width) items for pack_fields."""
    uv, uw, lv, lw = rice_escape_fields(np.asarray(mag), np.asarray(k))
    val = np.empty(2 * uv.size, np.uint64)
    wid = np.empty(2 * uv.size, np.int64)
    val[0::2], wid[0::2], val[1::2], wid[1::2] = uv, uw, lv, lw
    return val, wid, uw + lw


# Rice code = Golomb code with m = 2**k: v >> k zeros, a one, then the k low bits
# (Rice 1979; CCSDS 121.0-B "fundamental sequence" codeword of m is m zeros then a
# one, and the split-sample option sends the k low bits; from memory of the standard).
# The last three rows are Golomb 1966 codewords with m = 4 and m = 1 (hand computed
# from the definition: a power-of-two modulus has no truncated remainder).
@pytest.mark.parametrize("v, k, word", [
    (0, 0, "1"), (1, 0, "01"), (3, 0, "0001"),      # fundamental sequence (k = 0)
    (9, 2, "00101"), (5, 1, "0011"), (0, 3, "1000"), (13, 3, "01101"),
    (6, 2, "0110"), (0, 0, "1"), (2, 0, "001"),
])
def test_rice_hand_computed(v, k, word):
    val, wid, cw = rice_items([v], [k])
    assert bits_of(val, wid) == word
    assert rice_escape_bits(np.array([v]), np.array([k])).tolist() == [len(word)]
    got = read_rice_escape(BitReader(bytes_of(word)), np.array([0]), np.array([k]))
    assert [a.tolist() for a in got] == [[v], [len(word)]]


def test_rice_escape_hand_computed():
    # The layout's escape rule (codec/FRAME_LAYOUT.md, version 2): quotient 32 or
    # more -> 32 zeros, a one, the magnitude in 53 bits.  200 >> 2 = 50 >= 32.
    val, wid, cw = rice_items([200], [2])
    assert bits_of(val, wid) == "0" * 32 + "1" + format(200, "053b")
    assert RICE_ESCAPE == 32 and ESCAPE_BITS == 53  # the document's numbers
    # a run of 33 zeros is no codeword: it reads as -1
    got, _ = read_rice_escape(BitReader(bytes_of("0" * 40 + "1")), np.array([0]), np.array([0]))
    assert got.tolist() == [-1]


# Exp-Golomb order 0 is the ue(v) code of ITU-T H.264 (clause 9.1, table 9-2):
# 0 -> 1, 1 -> 010, 2 -> 011, 3 -> 00100, 7 -> 0001000.  A layout writes it as
# the value v + 1 in exp_golomb_bits(v) bits (FRAME_LAYOUT.md).
@pytest.mark.parametrize("v, word", [
    (0, "1"), (1, "010"), (2, "011"), (3, "00100"), (4, "00101"), (7, "0001000"),
])
def test_exp_golomb_hand_computed(v, word):
    nb = exp_golomb_bits(np.array([v]))
    assert bits_of([v + 1], nb) == word
    assert pack_fields(np.array([v + 1]), nb).tobytes() == bytes_of(word).tobytes()
    got = read_exp_golomb(BitReader(bytes_of(word)), np.array([0]))
    assert [a.tolist() for a in got] == [[v], [len(word)]]


def _sequential(reader_fn, nbits, count):
    """Walk codewords one after another, as a receiver does (test-only loop)."""
    pos, out = 0, []
    for _ in range(count):
        v, used = reader_fn(np.array([pos]))
        out.append(int(v[0]))
        pos += int(used[0])
    assert pos == nbits
    return out


@pytest.mark.parametrize("k", range(0, 7))
def test_rice_exhaustive_small(k):
    # every value up to quotient 50: plain Rice codewords below quotient 32, escapes above
    v = np.arange(0, min(2000, 51 << k))
    val, wid, cw = rice_items(v, np.full(v.size, k))
    plain = (v >> k) < RICE_ESCAPE
    # the plain codewords are the Rice code by its definition (Rice 1979)
    assert all(bits_of(val[2 * i : 2 * i + 2], wid[2 * i : 2 * i + 2])
               == "0" * (x >> k) + "1" + (format(x & ((1 << k) - 1), f"0{k}b") if k else "")
               for i, x in enumerate(v[plain].tolist()))
    buf = pack_fields(val, wid)
    r = BitReader(buf)
    kk = np.full(v.size, k)
    got, used = read_rice_escape(r, np.cumsum(cw) - cw, kk)
    assert np.array_equal(got, v) and np.array_equal(used, cw)
    assert _sequential(lambda p: read_rice_escape(r, p, np.array([k])), int(cw.sum()),
                       v.size) == v.tolist()


def test_exp_golomb_exhaustive_small():
    v = np.arange(0, 1000)
    # independent writer: (bit_length(v + 1) - 1) zeros, then v + 1 in binary (H.264 9.1)
    words = ["0" * (int(x + 1).bit_length() - 1) + format(int(x + 1), "b") for x in v]
    cw = np.array([len(w) for w in words])
    assert np.array_equal(exp_golomb_bits(v), cw)
    assert pack_fields(v + 1, cw).tobytes() == bytes_of("".join(words)).tobytes()
    got, used = read_exp_golomb(BitReader(bytes_of("".join(words))), np.cumsum(cw) - cw)
    assert np.array_equal(got, v) and np.array_equal(used, cw)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 2**52 - 1), min_size=1, max_size=40), st.integers(0, 52))
def test_rice_escape_large_round_trip(values, k):
    mag = np.array(values, dtype=np.int64)
    kk = np.full(mag.size, k)
    val, wid, cw = rice_items(mag, kk)
    r = BitReader(pack_fields(val, wid))
    got, used = read_rice_escape(r, np.cumsum(cw) - cw, kk)
    assert np.array_equal(got, mag) and np.array_equal(used, cw)
    assert cw.max() <= RICE_ESCAPE + 1 + ESCAPE_BITS


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 2**52), min_size=1, max_size=40))
def test_exp_golomb_large_round_trip(values):
    words = "".join("0" * (int(x + 1).bit_length() - 1) + format(x + 1, "b") for x in values)
    cw = exp_golomb_bits(np.array(values, dtype=np.int64))
    got, _ = read_exp_golomb(BitReader(bytes_of(words)), np.cumsum(cw) - cw)
    assert got.tolist() == values


@settings(max_examples=80, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 64), st.integers(0, 2**64 - 1)), max_size=60))
def test_pack_fields_matches_plain_python(fields):
    w = np.array([f[0] for f in fields], dtype=np.int64)
    v = np.array([f[1] % (1 << f[0]) if f[0] < 64 else f[1] for f in fields], dtype=np.uint64)
    packed = pack_fields(v, w)
    assert packed.tobytes() == bytes_of(bits_of(v, w)).tobytes()


def test_pack_fields_refuses_fields_over_64_bits():
    with pytest.raises(ValueError):
        pack_fields(np.array([1, 1]), np.array([3, 65]))


@settings(max_examples=80, deadline=None)
@given(st.binary(min_size=1, max_size=40), st.data())
def test_reader_matches_plain_python(data, draw):
    bits = "".join(format(b, "08b") for b in data)
    pos = np.array(draw.draw(st.lists(st.integers(0, len(bits)), min_size=1, max_size=20)))
    width = np.array([draw.draw(st.integers(0, min(57, len(bits) - p))) for p in pos])
    want = [int(bits[p : p + w], 2) if w else 0 for p, w in zip(pos.tolist(), width.tolist())]
    assert BitReader(data).read(pos, width).tolist() == want
    assert read_fields(np.frombuffer(data, np.uint8), pos, width).tolist() == want
    # the windows past the end read as zero bits; a strict read refuses them
    assert BitReader(data).read(np.array([len(bits)]), np.array([9])).tolist() == [0]
    with pytest.raises(IndexError):
        read_fields(np.frombuffer(data, np.uint8), np.array([len(bits) - 1]), np.array([2]))


def test_bit_length_matches_python():
    # int.bit_length (Python language reference) at every power of two and its
    # neighbours up to 2**63 - 1, where float64 rounding would be off by one.
    x = sorted({v for e in range(64) for v in ((1 << e) - 1, 1 << e, (1 << e) + 1)
                if v < 2**63})
    assert bit_length(np.array(x, dtype=np.int64)).tolist() == [v.bit_length() for v in x]


def test_zigzag_round_trip_and_order():
    v = np.arange(-1000, 1000)
    assert np.array_equal(unzigzag(zigzag(v)), v)
    assert list(zigzag(np.array([0, -1, 1, -2, 2]))) == [0, 1, 2, 3, 4]


def test_context_rule_is_least_k():
    # LOCO-I rule on the scaled sum t' = (11 t) >> 4: least k with count * 2**k >= t'
    # (checked by brute force, no source needed beyond the definition).
    t = np.arange(0, 3000)
    for count in (1, 2, 3, 4):
        k = rice_k_from_context(t, count)
        ts = (t * 11) >> 4
        brute = np.array([next(kk for kk in range(64) if count << kk >= x) for x in ts])
        assert np.array_equal(k, brute)
