"""The lane-parallel range coder of layout v3 against independent references.

References used here:
* a scalar range coder written from the published method (G. N. N. Martin
  1979; Witten, Neal & Cleary 1987) with unbounded Python integers, so carries
  need no special handling: it must give the same bytes;
* the ideal code length -sum log2 p of the model, walked coefficient by
  coefficient in plain Python (a range coder spends it plus a few bytes);
* the zero-modified geometric law computed in floating point.
"""

import itertools
import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

import codec.entropy.rangecoder as R

TOP = 1 << 24


def _klass(s: int, cnt: int, j: int, n: int) -> int:
    """Context class by the rule of FRAME_LAYOUT.md, scalar."""
    band = min(max(((256 * j) // n).bit_length() - 1, 0), 7)
    if s == 0:
        return band
    u = (16 * s) // cnt
    bl = u.bit_length()
    scale = min(max(1 + 2 * (bl - 3) + ((u >> (bl - 2)) & 1), 1), 120)
    return 8 * scale + band


def _ops_scalar(row: list[int], count: int) -> list[tuple[int, int, int]]:
    """(cum, freq, shift) of one subframe's coded coefficients, straight from the spec."""
    cum = R.CUM.tolist()
    ops = []

    def model(table, sym):
        ops.append((cum[table][sym], cum[table][sym + 1] - cum[table][sym], R.TOTAL_BITS))

    def bypass(value, width):
        while width > 0:
            w = min(width, 16)
            width -= w
            ops.append(((value >> width) & ((1 << w) - 1), 1, w))

    mags = [abs(v) for v in row]
    for j in range(count):
        m = mags[j]
        if j == 0:
            b = m.bit_length()
            model(R.LEN_ROW, b)
            bypass(m & ((1 << max(b - 1, 0)) - 1), max(b - 1, 0))
        else:
            prev = mags[max(0, j - 4) : j]
            c = _klass(sum(prev), len(prev), j, len(row))
            s = int(R.SHIFT[c])
            hi = m >> s
            if hi >= R.MODEL_SYMBOLS:
                model(c, R.MODEL_SYMBOLS)
                e = hi - R.MODEL_SYMBOLS
                b = e.bit_length()
                model(R.LEN_ROW, b)
                bypass(e & ((1 << max(b - 1, 0)) - 1), max(b - 1, 0))
            else:
                model(c, hi)
            bypass(m & ((1 << s) - 1), s)
        if m:
            ops.append((int(row[j] < 0), 1, 1))
    return ops


def _encode_reference(ops) -> bytes:
    """Range coder with an unbounded low: every byte ever shifted out stays in it."""
    low, rng, shifts = 0, (1 << 32) - 1, 0
    for cum, freq, shift in ops:
        r = rng >> shift
        low += r * cum
        rng = r * freq
        while rng < TOP:
            low <<= 8
            rng <<= 8
            shifts += 1
    low = -(-low // TOP) * TOP  # round up to a multiple of 2**24: one more byte
    out = (low >> 24).to_bytes(shifts + 1, "big")
    return out.rstrip(b"\x00")


def _lanes(q, count, lane):
    cum, freq, shift, row = R.coefficient_ops(q, count)
    data, length = R.encode_lanes(cum, freq, shift, lane[row], int(lane.max()) + 1)
    start = np.cumsum(length) - length
    return data, length, start


def _roundtrip(q, count, lane):
    data, length, start = _lanes(q, count, lane)
    got, bad, reads = R.decode_coefficients(data, start, start + length, lane, count, q.shape[1])
    want = np.where(np.arange(q.shape[1]) < count[:, None], q, 0)
    assert np.array_equal(got, want)
    assert not bad.any() and (length <= reads + 1).all()
    return data, length, start


def test_every_small_subframe_round_trips_and_matches_the_reference_coder():
    # exhaustive: every vector of three codes in -3..3, two subframes per lane
    q = np.array(list(itertools.product(range(-3, 4), repeat=3)), dtype=np.int64)
    count = np.full(q.shape[0], 3)
    lane = np.arange(q.shape[0]) // 2
    data, length, start = _roundtrip(q, count, lane)
    for ln in range(0, lane.max() + 1, 7):
        ops = [op for i in np.flatnonzero(lane == ln) for op in _ops_scalar(q[i].tolist(), 3)]
        want = _encode_reference(ops)
        assert bytes(data[start[ln] : start[ln] + length[ln]]) == want


def test_ops_match_the_scalar_spec():
    rng = np.random.default_rng(5)
    q = np.rint(rng.laplace(0, 30, (20, 32)) * np.exp(-np.arange(32) / 6)).astype(np.int64)
    q[3, 5] = 10**12  # an escape
    count = np.array([32, 0, 1, 17] * 5)
    cum, freq, shift, row = R.coefficient_ops(q, count)
    for i in range(q.shape[0]):
        got = list(zip(cum[row == i].tolist(), freq[row == i].tolist(), shift[row == i].tolist()))
        assert got == _ops_scalar(q[i].tolist(), int(count[i]))


@settings(max_examples=40, deadline=None)
@given(st.lists(st.lists(st.integers(-(2**52) + 1, 2**52 - 1), min_size=8, max_size=8),
                min_size=1, max_size=6),
       st.integers(0, 8), st.integers(1, 3))
def test_large_values_round_trip(rows, count, lanes):
    q = np.array(rows, dtype=np.int64)
    n = q.shape[0]
    lane = np.sort(np.arange(n) % lanes)
    lane = np.unique(lane, return_inverse=True)[1]
    data, length, start = _roundtrip(q, np.full(n, count), lane)
    for ln in range(int(lane.max()) + 1):
        ops = [op for i in np.flatnonzero(lane == ln) for op in _ops_scalar(q[i].tolist(), count)]
        assert bytes(data[start[ln] : start[ln] + length[ln]]) == _encode_reference(ops)


def test_lanes_of_very_unequal_lengths_match_the_reference_coder():
    # one long lane beside many short (and empty) ones: the encoder reads the lanes'
    # operations by index here instead of from a padded table; same bytes either way
    rng = np.random.default_rng(8)
    n = 32
    q = np.rint(rng.laplace(0, 40, (40, n)) * np.exp(-np.arange(n) / 8)).astype(np.int64)
    count = np.r_[np.full(30, n), rng.integers(0, 4, 10)]
    lane = np.r_[np.zeros(30, np.int64), np.arange(1, 11)]
    data, length, start = _roundtrip(q, count, lane)
    for ln in range(11):
        ops = [op for i in np.flatnonzero(lane == ln) for op in _ops_scalar(q[i].tolist(),
                                                                         int(count[i]))]
        assert bytes(data[start[ln] : start[ln] + length[ln]]) == _encode_reference(ops)


def test_coded_length_is_within_a_few_bytes_of_the_ideal():
    # -sum log2 p of the model, coefficient by coefficient (Shannon): an arithmetic
    # coder with 32-bit state spends at most a few bytes more per lane.
    rng = np.random.default_rng(11)
    n = 64
    q = np.rint(rng.laplace(0, 20, (60, n)) * np.exp(-np.arange(n) / 10)).astype(np.int64)
    count = np.full(60, n)
    lane = np.arange(60) // 4
    data, length, start = _roundtrip(q, count, lane)
    for ln in range(15):
        bits = 0.0
        for i in np.flatnonzero(lane == ln):
            for _cum, freq, shift in _ops_scalar(q[i].tolist(), n):
                bits += shift - math.log2(freq)
        assert bits / 8 - 1 <= length[ln] <= bits / 8 + 3
    # and the encoder's estimate is that same ideal length
    est = R.coefficient_cost_bits(q, count)
    ideal = [sum(s - math.log2(f) for _, f, s in _ops_scalar(q[i].tolist(), n))
             for i in range(60)]
    assert np.allclose(est, ideal)


def test_geometric_tables_follow_the_law():
    # P(0) = z/2**16 and P(i) proportional to theta**(i-1) for i >= 1, in floating point
    for a, z in [(6796, 41286), (57148, 5369), (30000, 0)]:
        cum = R.geometric_cum(a, z)
        freq = np.diff(cum)
        assert cum[0] == 0 and cum[-1] == R.TOTAL and (freq >= 1).all()
        theta = a / 65536
        rr = R.TOTAL - R.MODEL_SYMBOLS - 1
        p0 = z / 65536 if z else 1 - theta
        for i in range(1, R.MODEL_SYMBOLS + 1):
            want = rr * p0 + rr * (1 - p0) * (1 - theta ** (i - 1)) + i
            assert abs(cum[i] - want) <= 2


def test_a_corrupt_lane_is_flagged_or_decodes_to_something_bounded():
    rng = np.random.default_rng(2)
    q = np.rint(rng.laplace(0, 5, (4, 16))).astype(np.int64)
    count = np.full(4, 16)
    lane = np.arange(4)
    data, length, start = _lanes(q, count, lane)
    bad_data = data.copy()
    bad_data[start[1]] ^= 0xFF
    _, _, clean_reads = R.decode_coefficients(data, start, start + length, lane, count, 16)
    got, bad, reads = R.decode_coefficients(bad_data, start, start + length, lane, count, 16)
    assert np.array_equal(got[[0, 2, 3]], q[[0, 2, 3]])  # the other lanes are untouched
    assert np.array_equal(reads[[0, 2, 3]], clean_reads[[0, 2, 3]])
    # and the damaged lane shows it: other values, and flagged impossible or reading
    # another number of bytes than its clean self (which the layout's length check refuses)
    assert not np.array_equal(got[1], q[1])
    assert bad[1] or reads[1] != clean_reads[1]
