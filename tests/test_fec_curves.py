"""The shipped coded BER curves (link_sim/data/fec_curves.json) against theory, and how the
budget reads their 95 % upper bounds."""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pytest
from scipy.special import erfc
from scipy.stats import chi2

from codec import ProfileError
from link_sim._budget import CURVES_PATH, required_ebn0
from link_sim._fec import Hamming74


def _q(x):
    # Gaussian tail Q(x) = erfc(x / sqrt 2) / 2 (Proakis, Digital Communications, sec. 2.3).
    return 0.5 * erfc(np.asarray(x, float) / math.sqrt(2.0))


@pytest.fixture(scope="module")
def curves():
    return json.loads(CURVES_PATH.read_text(encoding="utf-8"))["curves"]


def _distance_spectrum(gens=(0o171, 0o133), k=7, dmax=40) -> np.ndarray:
    """c_d: total information weight of the first-event error paths of output weight d.

    Worked out here from the generator polynomials alone: every path that leaves state 0
    with a 1, wanders through non-zero states and returns to state 0, summed by output
    weight (Viterbi & Omura, Principles of Digital Communication and Coding, 1979, ch. 4:
    the transfer function T(D, N) expanded in D, differentiated in N at N = 1).
    """
    states = 1 << (k - 1)
    weight = np.array([[sum(bin(((b << (k - 1)) | s) & g).count("1") & 1 for g in gens)
                        for b in (0, 1)] for s in range(states)])
    paths = np.zeros((states, dmax + 1))   # number of partial paths by (state, output weight)
    info = np.zeros((states, dmax + 1))    # their total information weight
    first = 1 << (k - 1)
    paths[first >> 1, weight[0, 1]] = info[first >> 1, weight[0, 1]] = 1.0
    spectrum = np.zeros(dmax + 1)
    while paths.any():
        new_paths, new_info = np.zeros_like(paths), np.zeros_like(info)
        for s, b in itertools.product(range(1, states), (0, 1)):
            w, t = weight[s, b], ((b << (k - 1)) | s) >> 1
            if w > dmax or not paths[s].any():
                continue
            moved_p = np.zeros(dmax + 1)
            moved_i = np.zeros(dmax + 1)
            moved_p[w:] = paths[s, : dmax + 1 - w]
            moved_i[w:] = info[s, : dmax + 1 - w] + b * paths[s, : dmax + 1 - w]
            if t == 0:
                spectrum += moved_i
            else:
                new_paths[t] += moved_p
                new_info[t] += moved_i
        paths, info = new_paths, new_info
    return spectrum


def test_weight_spectrum_is_the_published_one():
    # K=7 (171, 133) code: d_free = 10 (Proakis, Digital Communications, 5th ed., table of
    # rate-1/2 maximum free distance codes) and information-weight spectrum c_10.. = 36, 211,
    # 1404, 11633, 77433 (Frenger, Orten & Ottosson, IEEE Commun. Letters 3 (1999) 317, and
    # CCSDS 130.1-G; values from memory, confirmed by the independent path count here).
    c = _distance_spectrum()
    assert np.flatnonzero(c)[0] == 10
    assert c[10:19].tolist() == [36, 0, 211, 0, 1404, 0, 11633, 0, 77433]


def test_conv_curve_lies_below_the_union_bound_and_reaches_1e5_near_4_2_db(curves):
    conv = curves["conv"]
    c = _distance_spectrum()
    d = np.arange(c.size)
    rate = conv["rate_on_air"]  # Eb charged for the tail bits too
    checked = 0
    for e, k, errs, bits in zip(conv["ebn0_db"], conv["events"], conv["errors_post_fec"],
                                conv["bits_info"]):
        # Soft-decision union bound P_b <= sum_d c_d Q(sqrt(2 d R Eb/N0)) (Proakis sec. 8.2,
        # Viterbi & Omura ch. 4).  Only where the truncated sum (d <= 40) has converged: its
        # last terms are below 1 % of the total, so truncation cannot hide part of the bound.
        terms = c * _q(np.sqrt(2.0 * d * rate * 10 ** (e / 10)))
        bound = terms.sum()
        if bound > 0.1 or terms[-2:].max() > 0.01 * bound:
            continue
        # The bound is tight above 4 dB, so the measured BER is compared with its statistics:
        # the one-sided 99.9 % lower limit of the error-event count (exact Poisson, Garwood
        # 1936) times the point's wrong bits per event must not exceed the bound.
        lower_events = 0.5 * chi2.ppf(1e-3, 2 * k) if k else 0.0
        assert lower_events * (errs / max(k, 1)) / bits <= bound, (e, errs / bits, bound)
        checked += 1
    assert checked >= 5
    # BER 1e-5 between 4.0 and 4.5 dB: the usual figure for this code with unquantized soft
    # decisions (about 4.2-4.4 dB; Proakis sec. 8.2 figures; common practice, from memory),
    # for the point estimate and for the conservative reading the budget uses.
    assert 4.0 <= conv["required_ebn0_db_estimate"]["1e-05"] <= 4.5
    assert 4.0 <= required_ebn0("bpsk", "conv", 1e-5).ebn0_db <= 4.5
    # And at least 100 error events behind every point above BER 1e-5.
    events, ber = np.asarray(conv["events"]), np.asarray(conv["ber_post_fec"])
    assert (events[ber >= 1e-5] >= 100).all()


def _hamming_pattern_table():
    """For each of the 128 error patterns: its weight, and the wrong information bits after
    minimum-distance decoding (the code is linear, so sending the all-zero word suffices).

    The decoder here is brute force over the 16 codewords the project's encoder makes from
    the 16 messages; Hamming (7,4) is perfect, so every 7-bit word is within distance 1 of
    exactly one codeword (Hamming 1950).
    """
    code = Hamming74()
    messages = np.array(list(itertools.product((0, 1), repeat=4)), np.uint8)
    words = code.encode_nibbles(messages)
    patterns = np.array(list(itertools.product((0, 1), repeat=7)), np.uint8)
    dist = (patterns[:, None, :] ^ words[None, :, :]).sum(axis=2)
    assert (np.sort(dist, axis=1)[:, 0] <= 1).all() and (np.sort(dist, axis=1)[:, 1] > 1).all()
    decoded = messages[dist.argmin(axis=1)]
    return patterns.sum(axis=1), decoded.sum(axis=1)


def test_hamming_curve_matches_the_exact_post_decoding_ber(curves):
    ham = curves["hamming74"]
    w, info_errors = _hamming_pattern_table()
    checked = 0
    for e, ev, trials, errs in zip(ham["ebn0_db"], ham["events"], ham["trials"],
                                   ham["errors_post_fec"]):
        # Hard decisions on BPSK: channel bit error p = Q(sqrt(2 R Eb/N0)) (Proakis 4.3).
        p = float(_q(math.sqrt(2.0 * ham["rate_on_air"] * 10 ** (e / 10))))
        prob = p**w * (1 - p) ** (7 - w)          # each of the 128 patterns
        word_error = prob[info_errors > 0].sum()  # exact codeword error probability
        ber_exact = (prob * info_errors).sum() / 4.0
        # Word errors are Poisson(trials * P_word): the exact two-sided Poisson limits at
        # 99.99 % (Garwood 1936) around the count must hold the expected count.
        lo = 0.5 * chi2.ppf(5e-5, 2 * ev) if ev else 0.0
        hi = 0.5 * chi2.ppf(1 - 5e-5, 2 * ev + 2)
        assert lo <= trials * word_error <= hi, (e, ev, trials * word_error)
        # Wrong bits are a compound count: mean trials * sum P(e) n(e), variance
        # trials * sum P(e) n(e)^2 (n = wrong information bits of pattern e); 4.5 sigma.
        mean = trials * (prob * info_errors).sum()
        sigma = math.sqrt(trials * (prob * info_errors**2).sum())
        assert abs(errs - mean) <= 4.5 * sigma + 1, (e, errs, mean)
        # And the file's 95 % upper bound is above the exact BER wherever 100 events were seen.
        if ev >= 100:
            i = ham["ebn0_db"].index(e)
            assert ham["ber_post_fec_upper95"][i] >= ber_exact * 0.97
            checked += 1
    assert checked >= 10


def test_every_point_ran_to_100_events_or_its_bit_limit(curves):
    limits = json.loads(CURVES_PATH.read_text())["provenance"]["bit_limit_per_point"]
    for fec, c in curves.items():
        events, bits = np.asarray(c["events"]), np.asarray(c["bits_info"])
        assert ((events >= 100) | (bits >= limits[fec])).all(), fec
        upper, ber = np.asarray(c["ber_post_fec_upper95"]), np.asarray(c["ber_post_fec"])
        assert (upper >= ber).all()


def _write(path, x, upper, events):
    doc = {"provenance": {"command": "test", "seed": 1},
           "curves": {"conv": {"modulation": "bpsk", "rate_on_air": 0.5, "ebn0_db": x,
                               "ber_post_fec": upper, "errors_post_fec": events,
                               "events": events, "ber_post_fec_upper95": upper}}}
    path.write_text(json.dumps(doc))
    return path


def test_budget_reads_the_upper_bound_made_monotone(tmp_path):
    # A noisy point (3 dB) whose bound dips below the next point's: the budget must use the
    # running maximum from the high end, so it reads 1e-5 between 3.5 and 4 dB, not before 3 dB.
    x = [2.0, 2.5, 3.0, 3.5, 4.0]
    upper = [1e-3, 1e-4, 5e-6, 2e-5, 1e-6]
    path = _write(tmp_path / "c.json", x, upper, [500, 300, 100, 100, 100])
    got = required_ebn0("bpsk", "conv", 1e-5, curves_path=path)
    # log-linear between (3.5, 2e-5) and (4.0, 1e-6): 3.5 + 0.5 * log(2) / log(20)
    assert got.ebn0_db == pytest.approx(3.5 + 0.5 * math.log10(2) / math.log10(20))
    assert "95 % upper bound" in got.source and "error events" in got.source
    with pytest.raises(ProfileError, match="does not extrapolate"):
        required_ebn0("bpsk", "conv", 1e-7, curves_path=path)
