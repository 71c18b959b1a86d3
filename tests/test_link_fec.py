"""Forward error correction against the published codes' guarantees."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import binom

from link_sim._fec import Convolutional, Hamming74, NoCode, ReedSolomon255


def _gf_mul_slow(a: int, b: int, poly: int = 0x187) -> int:
    """Carry-less multiply mod the CCSDS field polynomial, bit by bit (independent of tables)."""
    r = 0
    while b:
        if b & 1:
            r ^= a
        b >>= 1
        a <<= 1
        if a & 0x100:
            a ^= poly
    return r


def _gf_pow_slow(a: int, e: int) -> int:
    r = 1
    for _ in range(e):
        r = _gf_mul_slow(r, a)
    return r


def test_hamming74_corrects_every_single_error_exhaustively():
    # Hamming 1950: the (7,4) code corrects any single error; all 16 messages x 7 positions.
    code = Hamming74()
    msgs = ((np.arange(16)[:, None] >> np.arange(3, -1, -1)) & 1).astype(np.uint8)
    words = code.encode_nibbles(msgs)
    assert len({w.tobytes() for w in words}) == 16
    assert (code.G.astype(int) @ code.H.T.astype(int) % 2 == 0).all()
    bad = np.repeat(words, 7, axis=0)
    bad[np.arange(bad.shape[0]), np.tile(np.arange(7), 16)] ^= 1
    out, corrected = code.decode_words(bad)
    np.testing.assert_array_equal(out, np.repeat(msgs, 7, axis=0))
    assert corrected.all()
    # Minimum distance 3 (Hamming 1950): every pair of codewords differs in >= 3 places.
    d = (words[:, None, :] != words[None, :, :]).sum(axis=2)
    assert d[~np.eye(16, dtype=bool)].min() == 3


def test_stream_round_trip_without_errors():
    data = np.random.default_rng(0).integers(0, 256, 1000, dtype=np.uint8)
    for code in (NoCode(), Hamming74(), ReedSolomon255(2), Convolutional(64)):
        bits = code.encode(data)
        assert bits.size == code.channel_bits(data.size)
        out, stats = code.decode(bits, data.size)
        np.testing.assert_array_equal(out, data)
        assert stats.codewords_failed == 0


def test_rs_codewords_vanish_at_the_ccsds_generator_roots():
    # CCSDS 131.0-B: g(x) = prod_{j=112}^{143} (x - alpha^(11 j)), field poly 0x187.
    # Evaluate a codeword at every root with a bitwise field multiply (no tables).
    rs = ReedSolomon255()
    word = rs.encode_words(np.random.default_rng(1).integers(0, 256, (1, 223)))[0]
    assert word.size == 255
    for j in (112, 127, 143):
        root = _gf_pow_slow(2, (11 * j) % 255)
        acc = 0
        for sym in word.tolist():  # Horner, highest degree first
            acc = _gf_mul_slow(acc, root) ^ sym
        assert acc == 0
    assert not rs.syndromes(word[None]).any()


def _corrupt(words, count, rng):
    bad = words.copy()
    for row in bad:
        pos = rng.choice(255, count, replace=False)
        row[pos] ^= rng.integers(1, 256, count)
    return bad


def test_rs_corrects_16_symbol_errors_and_reports_17():
    # CCSDS 131.0-B: RS(255,223) corrects any 16 symbol errors per codeword.
    rng = np.random.default_rng(7)
    rs = ReedSolomon255()
    words = rs.encode_words(rng.integers(0, 256, (6, 223)))
    fixed, failed = rs.decode_words(_corrupt(words, 16, rng))
    assert not failed.any()
    np.testing.assert_array_equal(fixed, words)
    # Beyond the guarantee the decoder must say so (a miscorrection to another
    # codeword needs >= 17 more coincidences; probability ~1e-13 per word).
    fixed, failed = rs.decode_words(_corrupt(words, 17, rng))
    assert failed.all()


@pytest.mark.parametrize("depth", [1, 4])
def test_rs_interleaving_corrects_a_burst_of_16_times_depth_bytes(depth):
    # CCSDS 131.0-B: with depth I, a burst of 16*I consecutive bytes on air puts at
    # most 16 errors in each codeword; one byte more than that breaks one codeword.
    rng = np.random.default_rng(depth)
    rs = ReedSolomon255(depth)
    data = rng.integers(0, 256, 223 * depth, dtype=np.uint8)
    bits = rs.encode(data)
    start = 32 + 8 * 40  # after the 32-bit sync marker, 40 bytes in
    burst = bits.copy()
    burst[start: start + 8 * 16 * depth] ^= 1
    out, stats = rs.decode(burst, data.size)
    np.testing.assert_array_equal(out, data)
    wider = bits.copy()
    wider[start: start + 8 * (16 * depth + 1)] ^= 1
    _, stats = rs.decode(wider, data.size)
    assert stats.codewords_failed == 1


def test_conv_impulse_response_is_the_generators():
    # K=7 r=1/2 code, generators 171 and 133 octal (CCSDS 131.0-B sec. 3.3 / Proakis table
    # 8.2-1): a single 1 at the input produces the generator bits, MSB first, on C1 and the
    # complement of the generator bits on C2 (CCSDS inverts the G2 output).
    code = Convolutional()
    u = np.zeros((1, 7), np.uint8)
    u[0, 0] = 1
    out = code.encode_bits(u)[0]
    g1 = [int(b) for b in format(0o171, "07b")]
    g2 = [int(b) for b in format(0o133, "07b")]
    np.testing.assert_array_equal(out[:, 0], g1)
    np.testing.assert_array_equal(out[:, 1], 1 - np.array(g2))


def test_conv_symbols_match_a_hand_derived_ccsds_sequence():
    # CCSDS 131.0-B sec. 3.3: G1 = 1111001 (171 octal), G2 = 1011011 (133 octal), i.e.
    #   C1(t) = u(t) + u(t-1) + u(t-2) + u(t-3) + u(t-6)            (mod 2)
    #   C2(t) = NOT [u(t) + u(t-2) + u(t-3) + u(t-5) + u(t-6)]      (the inverted output)
    # sent as C1(1) C2(1) C1(2) C2(2) ..., register starting at zero.  For the input
    # u = 1 0 1 1 followed by the six zero tail bits, by hand:
    #   t        0 1 2 3 4 5 6 7 8 9
    #   u        1 0 1 1 0 0 0 0 0 0
    #   C1       1 1 0 1 0 0 0 0 1 1   (t=3: 1+1+0+1 = 1; t=6: u3+u0 = 0; t=8: u2 = 1)
    #   G2 sum   1 0 0 0 1 1 0 1 0 1   (t=4: u2 = 1; t=5: u3+u2+u0 = 1; t=9: u4+u3 = 1)
    #   C2=NOT   0 1 1 1 0 0 1 0 1 0
    # giving the symbols 10 11 01 11 00 00 01 00 11 10.
    code = Convolutional()
    u = np.array([[1, 0, 1, 1, 0, 0, 0, 0, 0, 0]], np.uint8)
    symbols = "".join(map(str, code.encode_bits(u).ravel()))
    assert symbols == "10" "11" "01" "11" "00" "00" "01" "00" "11" "10"
    # An all-zero input gives alternating symbols, the reason for the inversion.
    zeros = code.encode_bits(np.zeros((1, 8), np.uint8)).ravel()
    assert zeros.tolist() == [0, 1] * 8
    # And the decoder still returns the input, clean and with four channel errors.
    rng = np.random.default_rng(3)
    data = rng.integers(0, 256, 64, dtype=np.uint8)
    bits = code.encode(data)
    assert np.array_equal(code.decode(bits, data.size)[0], data)
    noisy = bits.copy()
    noisy[rng.choice(bits.size, 4, replace=False)] ^= 1
    assert np.array_equal(code.decode(noisy, data.size)[0], data)


def test_viterbi_corrects_any_four_errors_in_a_block():
    # The 171/133 code has free distance 10 (Proakis, table of maximum free distance
    # rate-1/2 codes; value from memory), so maximum-likelihood decoding of a
    # terminated block corrects every pattern of up to 4 channel errors.
    rng = np.random.default_rng(8)
    code = Convolutional(32)
    data = rng.integers(0, 256, 32 * 12, dtype=np.uint8)
    bits = code.encode(data)
    per = bits.size // 12
    noisy = bits.copy()
    for b in range(12):
        pos = b * per + rng.choice(per, 4, replace=False)
        noisy[pos] ^= 1
    out, _ = code.decode(noisy, data.size)
    np.testing.assert_array_equal(out, data)


def test_viterbi_soft_beats_hard_decisions():
    # Soft-decision Viterbi gains about 2 dB over hard decisions (Proakis sec. 8.2,
    # common practice): at the same noise, soft output has fewer bit errors.
    from link_sim import awgn

    rng = np.random.default_rng(12)
    code = Convolutional(128)
    data = rng.integers(0, 256, 128 * 16, dtype=np.uint8)
    bits = code.encode(data)
    soft = awgn(bits, 2.5, np.random.default_rng(1), rate=0.5, soft=True)
    hard = (soft < 0).astype(np.uint8)
    e_soft = np.unpackbits(code.decode(soft, data.size)[0] ^ data).sum()
    e_hard = np.unpackbits(code.decode(hard, data.size)[0] ^ data).sum()
    assert e_soft < e_hard


@pytest.mark.parametrize("errors", [1, 8, 16, 17, 30])
def test_rs_decoder_agrees_with_the_reedsolo_library(errors):
    # Reference library: reedsolo (PyPI) configured for the CCSDS code; our
    # vectorized Berlekamp-Massey/Chien/Forney must give the same words and failures.
    rng = np.random.default_rng(100 + errors)
    rs = ReedSolomon255()
    words = rs.encode_words(rng.integers(0, 256, (8, 223)))
    bad = _corrupt(words, errors, rng)
    ours, our_fail = rs.decode_words(bad)
    ref, ref_fail = rs.decode_words_reedsolo(bad)
    np.testing.assert_array_equal(our_fail, ref_fail)
    np.testing.assert_array_equal(ours[~our_fail], ref[~ref_fail])
    assert our_fail.all() == (errors > 16)


def test_rs_measured_ber_follows_the_bounded_distance_estimate():
    # Sklar, Digital Communications 2nd ed. sec. 8.1 (from memory): a bounded-distance
    # RS decoder leaves j > t symbol errors; with independent BPSK bit errors the
    # decoded BER is (1/n) sum_{j>t} j C(n,j) p_s^j (1-p_s)^(n-j) * p/p_s.  Bit errors
    # come in failed codewords, so the statistical spread is about 1/sqrt(F) with F
    # the failed codewords; we allow 4 of those standard errors.
    from link_sim import ber_bpsk, ber_rs_bounded_distance, linear_to_db, measured_ber_curve

    c = measured_ber_curve("rs255", "bpsk", [5.25], 223 * 8 * 1000, seed=21)
    rate = c["rate_on_air"][0]
    p = float(ber_bpsk(5.25 + linear_to_db(rate)))
    assert c["ber_channel"][0] == pytest.approx(p, rel=4 * np.sqrt((1 - p) / (p * 2_072_000)))
    expect = ber_rs_bounded_distance(p)
    failed = 1000 * binom.sf(16, 255, 1 - (1 - p) ** 8)  # expected failed codewords
    assert abs(c["ber_post_fec"][0] / expect - 1) <= 4 / np.sqrt(failed)
