"""Dependent (trellis-coded) quantization and frame layout version 4."""

import itertools
import math

import numpy as np
import pytest
import scipy.signal
from checks import assert_meets_target
from hypothesis import given, settings
from hypothesis import strategies as st
from streams import EXAMPLE_DIGEST, with_crc

import codec
from codec.layouts.envelope import FrameKey, frame_crc_ok, frame_extent
from codec.layouts.v3 import FrameBatchV3, pack_frames_v3, parse_frames_v3
from codec.quantize.trellis import TRANSITIONS, dequantize_levels, quantizer_ids, trellis_quantize


def test_state_machine_is_the_h266_one():
    # ITU-T H.266 dependent quantization: the VVC reference software packs the
    # next state of (state, parity) as (32040 >> ((state << 2) + (parity << 1))) & 3
    # (constant quoted from memory).
    want = [[(32040 >> ((s << 2) + (p << 1))) & 3 for p in (0, 1)] for s in range(4)]
    assert TRANSITIONS.tolist() == want


def test_levels_reconstruct_by_hand():
    # H.266 rule: states 0, 1 use Q0 (2k), states 2, 3 use Q1 (2k - sgn k).  By hand:
    # q0 = 1 in state 0 -> 2, odd -> state 2; q1 = 1 in Q1 -> 1, odd -> state 3;
    # q2 = -2 in Q1 -> -3, even -> state 3; q3 = 0 -> 0, state 3; q4 = 3 in Q1 -> 5.
    q = np.array([[1, 1, -2, 0, 3]])
    assert quantizer_ids(q).tolist() == [[0, 1, 1, 1, 1]]
    assert dequantize_levels(q).tolist() == [[2.0, 1.0, -3.0, 0.0, 5.0]]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(-6.0, 6.0), min_size=1, max_size=5))
def test_viterbi_finds_the_least_error_path(values):
    # The Viterbi algorithm returns the least-cost path of the trellis (Forney 1973):
    # checked against an exhaustive search over every level sequence near the input.
    c = np.array([values])
    q, err = trellis_quantize(c, np.array([1.0]))
    near = [range(math.floor(v / 2) - 3, math.floor(v / 2) + 4) for v in values]
    best = min(float(((c - dequantize_levels(np.array([s]))) ** 2).sum())
               for s in itertools.product(*near))
    assert err[0] == pytest.approx(best, abs=1e-9)
    assert float(((c - dequantize_levels(q)) ** 2).sum()) == pytest.approx(err[0], abs=1e-9)


def test_granular_gain_at_high_rate():
    # A uniform source over many steps (high rate): a scalar quantizer of the same
    # rate (step 2 d) errs (2 d)**2 / 12.  No quantizer of one dimension can gain more
    # than 10 log10(pi e / 6) = 1.53 dB over it (the space-filling bound); the 4-state
    # trellis gains about 0.97 dB (Eyuboglu & Forney 1993; figure quoted from memory).
    rng = np.random.default_rng(3)
    c = rng.uniform(-500.0, 500.0, size=(400, 256))
    _, err = trellis_quantize(c, np.ones(400))
    gain_db = 10 * math.log10((4.0 / 12.0) / (err.sum() / c.size))
    assert 0.85 < gain_db < 10 * math.log10(math.pi * math.e / 6)


# FRAME_LAYOUT.md, "Version 4 worked example": as the version 3 one, with
# q = [3, 0, 0, 0, 0, 0, 0, 0] coded by dependent quantization (quantizer bit 1).
HEADER_BITS = (
    "0100" "0" "00000001100" "11001101" "00000101" "0000" "0" "1" "0"
    "1000000000" "0001" "1" "00"
)
EXAMPLE = bytes.fromhex("e35a") + int(HEADER_BITS, 2).to_bytes(7, "big") + bytes([0x0A])


def test_worked_example_packs_to_the_documented_bytes():
    # CRC-16/IBM-3740 over the implicit profile prefix (digest 00 01 ... 1f), rebuilt
    # with binascii and hashlib
    want = with_crc(EXAMPLE, EXAMPLE_DIGEST)
    assert want.hex() == "e35a400ccd0505000c0a26fa"
    key = FrameKey(EXAMPLE_DIGEST)
    batch = FrameBatchV3(
        multi=np.array([False]), channel=np.array([1]), sequence=np.array([5]),
        windows=np.array([1]), valid=np.array([8]), frame=np.array([0]),
        step_code=np.array([512]), mean=None, q=np.array([[3, 0, 0, 0, 0, 0, 0, 0]]),
        quantizer=np.array([1]))
    data, length, _, lane = pack_frames_v3(batch, 0xABCD, 8, 2, version=4, key=key)
    assert data == want and length.tolist() == [12] and lane.tolist() == [1]
    assert frame_extent(memoryview(data), 0) == 12 and frame_crc_ok(memoryview(data), 0, 12, key)
    p = parse_frames_v3(data, np.array([0]), np.array([12]), 8, 2, False, version=4)
    assert list(p.verdict) == ["ok"] and p.row_trellis.tolist() == [True]
    assert p.q.tolist() == [[3, 0, 0, 0, 0, 0, 0, 0]]
    assert dequantize_levels(p.q)[0, 0] == 6.0  # Q0: 2k, where layout 3 reads 3


def _ar1(rho, n, seed):
    # Gaussian AR(1), x[i] = rho x[i-1] + e[i], by scipy.signal.lfilter (invented data)
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(n) * math.sqrt(1 - rho * rho)
    e[0] = rng.standard_normal()
    return scipy.signal.lfilter([1.0], [1.0, -rho], e)


@pytest.mark.parametrize("kw", [dict(), dict(multi_channel_frames=True),
                                dict(reference="total", frame_length=256, fidelity=0.999),
                                dict(basis="haar", frame_length=32, fidelity=0.999),
                                dict(windows_per_frame=3)])
def test_v4_round_trip_is_the_encoders_reconstruction(kw):
    x = np.stack([_ar1(0.95, 2500, s) for s in range(2)], axis=1) * 40.0
    # window scope: every window's own budget is checked below (frame scope: test_scope.py)
    enc = codec.encode(x, codec.Profile(layout_version=4, fidelity_scope="window", **kw))
    assert enc.data[2] >> 4 == 4
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    np.testing.assert_array_equal(dec.samples, enc.reconstruction)
    # every budget recomputed from the input and the profile (tests/verify.py), checked on
    # the decoded samples; the encoder's own 'budget' and 'met' are not consulted
    assert_meets_target(x, dec.samples, enc.profile)


def test_v4_saves_bits_at_high_fidelity_and_uses_both_quantizers():
    # Dependent quantization gains most at high rate (Marcellin & Fischer 1990);
    # at F = 0.999 on AR(1) rho = 0.9 layout 4 must spend fewer bits than layout 3.
    x = _ar1(0.9, 256 * 120, 4)[:, None]
    bits = {}
    for v in (3, 4):
        prof = codec.Profile(frame_length=256, fidelity=0.999, reference="total",
                             layout_version=v, fidelity_scope="window")
        enc = codec.encode(x, prof)
        bits[v] = len(enc.data) * 8 / x.size
    assert bits[4] < bits[3] - 0.05
    enc = codec.encode(_ar1(0.95, 256 * 60, 5)[:, None] * 10,
                       codec.Profile(frame_length=256, fidelity=0.99, layout_version=4,
                                     fidelity_scope="window"))
    p = parse_frames_v3(enc.data, *_frames(enc.data), 256, 1, True, version=4)
    assert 0 < p.row_trellis.sum() < p.row_trellis.size  # the per-frame choice is real
    assert enc.report["frames_trellis"] == p.row_trellis.sum()
    assert enc.report["layout_version"] == 4


def _frames(data):
    from codec.stream.search import locate_frames
    found = locate_frames(data)  # our own clean stream: split as written
    return found.offsets, found.lengths


def test_v3_and_v4_frames_decode_in_one_stream():
    x = _ar1(0.95, 1024, 6)[:, None]
    a = codec.encode(x[:512], codec.Profile(frame_length=64, layout_version=3))
    b = codec.encode(x[512:], codec.Profile(frame_length=64, layout_version=4),
                     first_window=8)
    dec = codec.decode(a.data + b.data, a.profile, samples=1024)
    np.testing.assert_array_equal(dec.samples[:512], a.reconstruction)
    np.testing.assert_array_equal(dec.samples[512:], b.reconstruction)


def test_step_search_from_the_scalar_hint_is_feasible_and_matches_a_full_search():
    # Every code returned must meet its frame's budget (Parseval: the error energy of the
    # coefficients is that of the samples).  The trellis error is not monotone in the
    # step (a lone coefficient's error oscillates with it), so neither search is exact;
    # the hinted one must rarely end finer than a bisection over the whole code range.
    from codec.quantize.select import choose_steps, frame_budgets, reference_energy
    from codec.quantize.steps import step_from_code
    from codec.transform.bases import as_basis

    rng = np.random.default_rng(8)
    n = 64
    kinds = [rng.standard_normal((200, n)).cumsum(axis=1),          # random walks
             rng.standard_normal((200, n)) * 1e-3,                    # white, tiny
             np.repeat(rng.standard_normal((200, 1)), n, axis=1),     # constants
             np.sign(rng.standard_normal((200, n))) * 50.0]           # square-ish
    fr = np.concatenate(kinds)
    basis = as_basis("dct", n)
    dc = basis.analyze(np.ones(n))
    cx = basis.analyze(fr)
    valid = np.full(len(fr), n)
    for f in (0.9, 0.99, 0.999):
        bud = frame_budgets(reference_energy(fr, valid, "total"), f, np.zeros(len(fr)), valid,
                            np.abs(fr).max(axis=1), n)
        hint = choose_steps(cx, None, dc, bud, 0.42)
        code = choose_steps(cx, None, dc, bud, hint=hint, trellis=True)
        _, err = trellis_quantize(cx, step_from_code(code))
        assert (err <= bud).all()
        full = choose_steps(cx, None, dc, bud, trellis=True)
        assert np.mean(code < full) < 0.05


@pytest.mark.parametrize("name", ["random", "spiky", "step", "square"])
def test_peak_error_mode_holds_with_dependent_quantization(name):
    # max |x - x_hat| <= E on the decoded samples (the definition of the mode)
    from test_peak_error import _profile, _signals
    x = _signals()[name][:, None]
    enc = codec.encode(x, _profile(0.01, 0.999, layout_version=4))
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert np.abs(dec.samples - x).max() <= 0.01


def test_stream_encoder_and_gap_frames_carry_layout_4():
    x = np.stack([_ar1(0.95, 1000, 9), _ar1(0.9, 1000, 10)], axis=1)
    prof = codec.Profile(layout_version=4, fidelity=0.999)
    se = codec.StreamEncoder(prof, 2)
    data = b"".join(se.feed(x[a : a + 300]) for a in range(0, 1000, 300)) + se.close()
    assert data[2] >> 4 == 4
    dec = codec.decode(data, se.profile, samples=1000)
    whole = codec.encode(x, se.profile)
    np.testing.assert_array_equal(dec.samples, whole.reconstruction)
    # NaN runs marked as gaps: gap-mask frames wrap layout-4 data frames
    xg = x.copy()
    xg[100:140, 0] = np.nan
    enc = codec.encode(xg, prof, gaps="mark")
    dec = codec.decode(enc.data, enc.profile, samples=1000)
    np.testing.assert_array_equal(np.isnan(dec.samples), np.isnan(xg))
    ok = ~np.isnan(xg)
    np.testing.assert_array_equal(dec.samples[ok], enc.reconstruction[ok])


def test_cli_layout_option_writes_layout_4(tmp_path):
    from codec.cli import main
    x = np.stack([_ar1(0.95, 600, 11), _ar1(0.9, 600, 12)], axis=1)
    src = tmp_path / "in.csv"
    np.savetxt(src, x, delimiter=",", header="a,b", comments="")
    out = tmp_path / "s.bin"
    assert main(["encode", str(src), "-o", str(out), "--layout", "4", "--fidelity", "0.999"]) == 0
    data = out.read_bytes()
    assert {b >> 4 for b in (data[o + 2] for o in _frames(data)[0].tolist())} == {4}
    assert main(["decode", str(out), "-o", str(tmp_path / "back.csv")]) == 0


def test_trim_tail_keeps_the_path_and_the_budget():
    # Dropping a row's last levels must leave the reconstruction of every earlier
    # coefficient as it was (the trellis state before them is unchanged) and keep the
    # error energy within the limit; the error it reports is the true one (Parseval).
    from codec.quantize.trellis import trim_tail
    rng = np.random.default_rng(13)
    c = rng.standard_normal((300, 32)) * np.linspace(20, 0.5, 32)
    step = np.full(300, 0.7)
    q, err = trellis_quantize(c, step)
    limit = err * rng.uniform(1.0, 3.0, 300)
    q2, err2 = trim_tail(c, q, step, err, limit)
    assert (err2 <= limit).all() and (err2 >= err).all()
    x1, x2 = dequantize_levels(q), dequantize_levels(q2)
    changed = q2 != q
    assert (q2[changed] == 0).all()
    for i in range(300):  # every change is a contiguous tail; the prefix reconstructs alike
        cut = np.flatnonzero(changed[i])
        if cut.size:
            assert (q2[i, cut[0]:] == 0).all()
            np.testing.assert_array_equal(x2[i, :cut[0]], x1[i, :cut[0]])
    assert changed.any()
    r = c - x2 * step[:, None]
    np.testing.assert_allclose(err2, (r * r).sum(axis=1))
