"""Golomb, Rice and exp-Golomb codes: hand-computed codewords, exhaustive and property checks."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from codec.entropy.bits import pack_fields
from codec.entropy.rice import (
    ESCAPE_BITS,
    RICE_ESCAPE,
    BitReader,
    exp_golomb_fields,
    golomb_fields,
    pack_bits,
    rice_escape_fields,
    rice_fields,
    rice_k_from_context,
    unzigzag,
    zigzag,
)


def bits_of(values, widths) -> str:
    """The packed fields as a string of 0/1 (independent of the packer: plain Python)."""
    return "".join(format(int(v), f"0{int(w)}b")[-int(w):] if w else ""
                   for v, w in zip(values, widths))


# Rice code = Golomb code with m = 2**k: v >> k zeros, a one, then the k low bits
# (Rice 1979; CCSDS 121.0-B "fundamental sequence" codeword of m is m zeros then a
# one, and the split-sample option sends the k low bits; from memory of the standard).
@pytest.mark.parametrize("v, k, word", [
    (0, 0, "1"), (1, 0, "01"), (3, 0, "0001"),      # fundamental sequence (k = 0)
    (9, 2, "00101"), (5, 1, "0011"), (0, 3, "1000"), (13, 3, "01101"),
])
def test_rice_hand_computed(v, k, word):
    val, wid = rice_fields(np.array([v]), k)
    assert bits_of(val, wid) == word


# Golomb 1966 with truncated-binary remainder: m = 3 -> b = 2, c = 1: r = 0 -> "0",
# r = 1 -> "10", r = 2 -> "11"; quotient in unary as zeros ended by a one
# (hand computed from the definition).
@pytest.mark.parametrize("v, m, word", [
    (0, 3, "10"), (1, 3, "110"), (2, 3, "111"), (3, 3, "010"), (7, 3, "00110"),
    (4, 5, "1111"), (2, 5, "110"), (6, 4, "0110"), (0, 1, "1"), (2, 1, "001"),
])
def test_golomb_hand_computed(v, m, word):
    val, wid = golomb_fields(np.array([v]), m)
    assert bits_of(val, wid) == word


# Exp-Golomb order 0 is the ue(v) code of ITU-T H.264 (clause 9.1, table 9-2):
# 0 -> 1, 1 -> 010, 2 -> 011, 3 -> 00100, 7 -> 0001000.  Order 1 by the
# definition: 0 -> 10, 1 -> 11, 2 -> 0100.
@pytest.mark.parametrize("v, k, word", [
    (0, 0, "1"), (1, 0, "010"), (2, 0, "011"), (3, 0, "00100"), (4, 0, "00101"),
    (7, 0, "0001000"), (0, 1, "10"), (1, 1, "11"), (2, 1, "0100"), (5, 1, "0111"),
])
def test_exp_golomb_hand_computed(v, k, word):
    val, wid = exp_golomb_fields(np.array([v]), k)
    assert bits_of(val, wid) == word


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
    # every value whose plain codeword fits one field (quotient up to 50)
    v = np.arange(0, min(2000, 51 << k))
    val, wid = rice_fields(v, k)
    buf = pack_fields(val, wid)
    r = BitReader(buf)
    pos = np.cumsum(wid) - wid
    got, used = r.rice(pos, k)
    assert np.array_equal(got, v) and np.array_equal(used, wid)
    assert _sequential(lambda p: r.rice(p, k), int(wid.sum()), v.size) == v.tolist()


@pytest.mark.parametrize("m", [1, 2, 3, 5, 7, 8, 12, 100])
def test_golomb_exhaustive_small(m):
    v = np.arange(0, min(2000, 51 * m))
    val, wid = golomb_fields(v, m)
    r = BitReader(pack_fields(val, wid))
    got, used = r.golomb(np.cumsum(wid) - wid, m)
    assert np.array_equal(got, v) and np.array_equal(used, wid)


@pytest.mark.parametrize("k", range(0, 5))
def test_exp_golomb_exhaustive_small(k):
    v = np.arange(0, 1000)
    val, wid = exp_golomb_fields(v, k)
    r = BitReader(pack_fields(val, wid))
    cw = wid[0::2] + wid[1::2]
    got, used = r.exp_golomb(np.cumsum(cw) - cw, k)
    assert np.array_equal(got, v) and np.array_equal(used, cw)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 2**52 - 1), min_size=1, max_size=40), st.integers(0, 52))
def test_rice_escape_large_round_trip(values, k):
    mag = np.array(values, dtype=np.int64)
    kk = np.full(mag.size, k)
    _, uw, lv, lw = rice_escape_fields(mag, kk)
    val = np.empty(2 * mag.size, np.uint64)
    wid = np.empty(2 * mag.size, np.int64)
    val[0::2], wid[0::2], val[1::2], wid[1::2] = 1, uw, lv, lw
    r = BitReader(pack_bits(val, wid))
    cw = uw + lw
    got, used = r.rice_escape(np.cumsum(cw) - cw, kk)
    assert np.array_equal(got, mag) and np.array_equal(used, cw)
    assert cw.max() <= RICE_ESCAPE + 1 + ESCAPE_BITS


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 2**52), min_size=1, max_size=40))
def test_exp_golomb_large_round_trip(values):
    v = np.array(values, dtype=np.int64)
    val, wid = exp_golomb_fields(v, 0)
    r = BitReader(pack_fields(val, wid))
    cw = wid[0::2] + wid[1::2]
    got, _ = r.exp_golomb(np.cumsum(cw) - cw, 0)
    assert np.array_equal(got, v)


@settings(max_examples=80, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 64), st.integers(0, 2**64 - 1)), max_size=60))
def test_pack_bits_matches_bit_level_packer(fields):
    w = np.array([f[0] for f in fields], dtype=np.int64)
    v = np.array([f[1] % (1 << f[0]) if f[0] < 64 else f[1] for f in fields], dtype=np.uint64)
    packed = pack_bits(v, w)
    assert bits_of(v, w) == "".join(format(b, "08b") for b in packed)[: int(w.sum())]
    if w.size == 0 or w.max() <= 57:  # the bit-level packer takes fields up to 57 bits
        assert packed.tobytes() == pack_fields(v, w).tobytes()


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
