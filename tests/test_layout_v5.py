"""Frame layout version 5 (long-term prediction): the worked example of FRAME_LAYOUT.md,
the decoding rule against an outside DCT, round trips and hostile lag fields."""

import dataclasses

import numpy as np
import pytest
from checks import assert_meets_target
from scipy.fft import idct
from streams import EXAMPLE_DIGEST, digest_of, with_crc

import codec
from codec._profile import profile_id
from codec.encoder import reconstruct
from codec.layouts.envelope import FrameKey
from codec.layouts.registry import CodedFrames, layout_for
from codec.layouts.v3 import FrameBatchV3, pack_frames_v3, parse_frames_v3
from codec.stream.search import locate_frames
from codec.transform.predict import add_predictions

KEY = FrameKey(EXAMPLE_DIGEST)  # as tests/test_layout_v3.py: digest 00 01 ... 1f

# FRAME_LAYOUT.md, "Version 5 worked example": N = 8, reference ac, one channel,
# profile id 0xABCD, two windows from sequence 5, both step code 512 (step 1);
# window 0: mean code 100, q = [0, 4, -2, 1, 0, 0, 0, 0] (L = 4);
# window 1: mean code 0, every coefficient 0 (L = 0), predicted with lag 3.
# Header and subframe bits written out by hand from the layout tables (mean and count
# sent whole: as changes they would cost 15 + 7 bits against 1 + 4; one step for both
# windows, so window 1 sends none; mean order 0: orders 0 to 5 all take 16 bits for the
# two means, the smallest is chosen).
HEADER5_BITS = (
    "0101" "0" "00000010010" "11001101" "00000101" "0001" "0" "0" "0" "0" "1" "1" "0000"
    "1000000000" "000000011001001" "0100" "0000011"
    "1" "0000" "1"
)
LANE5 = bytes.fromhex("df1f8f")  # window 0's coefficients, as layout 3 codes them (below)
EXAMPLE5 = bytes.fromhex("e35a") + int(HEADER5_BITS, 2).to_bytes(11, "big") + LANE5
Q0 = [0, 4, -2, 1, 0, 0, 0, 0]
LAG = 3
# bit positions after the sync marker: lag field of window 0, flag of window 1
LAG_AT, FLAG_AT = 46 + 10 + 15 + 4, 46 + 10 + 15 + 4 + 7 + 1 + 4


def _example_batch(lag=LAG, mean1=0):
    q = np.zeros((2, 8), np.int64)
    q[0] = Q0
    return FrameBatchV3(
        multi=np.array([False]), channel=np.array([0]), sequence=np.array([5]),
        windows=np.array([2]), valid=np.array([8]), frame=np.array([0, 0]),
        step_code=np.array([512, 512]), mean=np.array([100, mean1]), q=q,
        lag=np.array([0, lag]))


def _expected_samples(lag=LAG, flag=1):
    """The example's samples, outside the codec: SciPy's orthonormal DCT-III (the inverse
    of the orthonormal DCT-II) for window 0 plus its mean (code 100, step 1: 100 / sqrt(8)
    per sample), and window 1 = 0 plus p[i] = X[k N - lag + (i mod lag)] with k = 1,
    N = 8, X = window 0 (the periodic extension of FRAME_LAYOUT.md, written out here)."""
    x0 = idct(np.array(Q0, float), norm="ortho") + 100 / np.sqrt(8)
    x1 = np.zeros(8)
    if flag and 1 <= lag <= 8:
        x1 = x1 + np.array([x0[8 - lag + (i % lag)] for i in range(8)])
    return np.stack([x0, x1])


def test_worked_example_packs_to_the_documented_bytes():
    # CRC-16/IBM-3740 over the implicit prefix SHA-256(D || 00 00 00 12), rebuilt by the
    # catalogue implementation of tests/crcref.py (check value 0x29B1) and hashlib
    want = with_crc(EXAMPLE5, EXAMPLE_DIGEST)
    assert want.hex() == "e35a5012cd0510c200019280e1df1f8f6f43"
    data, length, sub_bits, lane = pack_frames_v3(_example_batch(), 0xABCD, 8, 1, version=5,
                                                  key=KEY)
    assert data == want and length.tolist() == [18] and lane.tolist() == [3]
    assert sub_bits.tolist() == [10 + 15 + 4 + 7, 0 + 1 + 4 + 1]  # window 1: no step (one_step)
    # the coefficient bytes are layout 3's: prediction adds header fields only
    v3 = dataclasses.replace(_example_batch(), lag=None)
    d3, _, _, lane3 = pack_frames_v3(v3, 0xABCD, 8, 1, key=KEY)
    assert lane3.tolist() == [3] and d3[-5:-2] == LANE5


def test_worked_example_parses_back():
    data = with_crc(EXAMPLE5, EXAMPLE_DIGEST)
    p = parse_frames_v3(data, np.array([0]), np.array([18]), 8, 1, True, version=5)
    assert p.verdict == ("ok",)
    assert p.header["predict"].tolist() == [1]
    assert p.header["mean_change"].tolist() == [0] and p.header["count_change"].tolist() == [0]
    assert p.q.tolist() == [Q0, [0] * 8]
    assert p.row_mean.tolist() == [100, 0] and p.row_step.tolist() == [512, 512]
    assert p.row_count.tolist() == [4, 0] and p.row_lag.tolist() == [0, LAG]
    assert p.row_offset.tolist() == [0, 1] and p.sequence.tolist() == [5]


def _ueg_bits(v, k):
    """Length of the k-th order exp-Golomb codeword of v >= 0: the order-0 code of v >> k
    (2 floor(log2(u + 1)) + 1 bits, ITU-T H.264 table 9-2) and k suffix bits (the k-th
    order code of H.264 clause 9.3.2.3; clause number from memory)."""
    u = v >> k
    return 2 * int(np.floor(np.log2(u + 1))) + 1 + k


@pytest.mark.parametrize("means", [[1000, 1500, 900, 1300], [-7000, 6000, 5, -4000],
                                   [3, 0, 1, 2]])
def test_mean_order_is_the_cheapest_and_parses_back(means):
    # four windows of one channel, every coefficient 0: the subframes hold step (one field),
    # mean and count; the frame's order k must be the cheapest for its mean fields
    w = len(means)
    batch = FrameBatchV3(
        multi=np.array([False]), channel=np.array([0]), sequence=np.array([0]),
        windows=np.array([w]), valid=np.array([8]), frame=np.zeros(w, np.int64),
        step_code=np.full(w, 512), mean=np.array(means), q=np.zeros((w, 8), np.int64),
        lag=np.zeros(w, np.int64))
    data, length, sub_bits, _ = pack_frames_v3(batch, 0xABCD, 8, 1, version=5, key=KEY)
    p = parse_frames_v3(data, np.array([0]), length, 8, 1, True, version=5)
    assert p.verdict == ("ok",) and p.row_mean.tolist() == means
    k = int(p.header["mean_order"][0])
    change = bool(p.header["mean_change"][0])
    sent = np.array(means) - np.r_[0, means[:-1]] * change  # whole, or changes after the first
    zz = np.where(sent >= 0, 2 * sent, -2 * sent - 1)  # zigzag
    cost = [sum(_ueg_bits(int(z), j) for z in zz) for j in range(16)]
    assert cost[k] == min(cost) and k == cost.index(min(cost))
    # subframe bits: the first sends step (10) + mean + count (4); later ones mean + count
    # (one_step: no step field)
    count = 4
    want = [10 + _ueg_bits(int(zz[0]), k) + count] + [
        _ueg_bits(int(z), k) + (1 if p.header["count_change"][0] else count) for z in zz[1:]]
    assert sub_bits.tolist() == want


def test_a_layout_3_parser_does_not_read_version_5_fields():
    # without the version, the predict flag and lag field are not layout 3's: the same
    # bits read as layout 3 misalign and the frame is refused (or differs)
    data = with_crc(EXAMPLE5, EXAMPLE_DIGEST)
    p = parse_frames_v3(data, np.array([0]), np.array([18]), 8, 1, True, version=3)
    assert p.verdict != ("ok",) or p.q.tolist() != [Q0, [0] * 8]


def _decode_example(data):
    """parse + the codec's synthesis + add_predictions, as codec.stream.frames does."""
    p = parse_frames_v3(data, np.array([0]), np.array([len(data)]), 8, 1, True, version=5)
    if p.verdict != ("ok",):
        return None
    rows = reconstruct(p.q, p.row_mean, p.row_step, codec.as_basis("dct", 8))
    return add_predictions(rows, p.row_lag, p.row_frame, p.row_channel, p.row_offset)


def test_worked_example_decodes_by_the_periodic_extension():
    got = _decode_example(with_crc(EXAMPLE5, EXAMPLE_DIGEST))
    want = _expected_samples()
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)
    # lag 3 < N: window 1 repeats window 0's last three samples
    np.testing.assert_allclose(got[1], np.r_[got[0][5:], got[0][5:], got[0][5:7]], atol=0)


@pytest.mark.parametrize("lag", [1, 3, 5, 8])
def test_every_reachable_lag_decodes_by_the_rule(lag):
    data, *_ = pack_frames_v3(_example_batch(lag=lag, mean1=-3), 0xABCD, 8, 1, version=5,
                              key=KEY)
    got = _decode_example(data)
    want = _expected_samples(lag)
    want[1] += -3 / np.sqrt(8)  # window 1's own mean code -3, step 1
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)


def test_a_lag_beyond_the_frame_is_not_packed():
    # lag 9 > 1 x N: window 1 cannot reach before the frame's first window
    with pytest.raises(RuntimeError):
        pack_frames_v3(_example_batch(lag=9), 0xABCD, 8, 1, version=5, key=KEY)


def _periodic(samples, channels, seed):
    rng = np.random.default_rng(seed)
    t = np.arange(samples)[:, None]
    phase = np.arange(channels)[None, :]
    return 3 * np.sin(2 * np.pi * t / 24 + phase) + 0.02 * rng.standard_normal(
        (samples, channels))


def _frames(data):
    loc = locate_frames(data)
    return list(zip(loc.offsets.tolist(), loc.lengths.tolist()))


def _row_lags(enc):
    prof = enc.profile
    out = []
    for off, ln in _frames(enc.data):
        frame = enc.data[off : off + ln]
        p = parse_frames_v3(frame, np.array([0]), np.array([ln]), prof.frame_length,
                            len(prof.channels), prof.reference == "ac", version=5)
        assert p.verdict == ("ok",)
        out += p.row_lag.tolist()
    return np.array(out)


@pytest.mark.parametrize("multi", [False, True])
@pytest.mark.parametrize("windows", [4, 16])
def test_periodic_signal_round_trip(multi, windows):
    x = _periodic(64 * 20 + 37, 3, seed=windows + multi)  # a short last window of 37
    prof = codec.Profile(frame_length=64, layout_version=5, windows_per_frame=windows,
                         multi_channel_frames=multi)
    enc = codec.encode(x, prof)
    assert enc.data[2] >> 4 == 5
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert dec.delivered.all()
    assert np.array_equal(dec.samples, enc.reconstruction)
    assert (_row_lags(enc) > 0).any()  # prediction is used on a period-24 wave
    assert enc.report["fidelity_scope"] == "frame"
    assert enc.report["fidelity_min"] >= enc.profile.fidelity - 1e-9
    assert_meets_target(x, dec.samples, enc.profile)  # recomputed from the decoded samples
    sd = codec.StreamDecoder(enc.profile, samples=x.shape[0])  # bytes in odd-sized chunks
    blocks = [b for a in range(0, len(enc.data), 37) for b in sd.feed(enc.data[a : a + 37])]
    out = np.concatenate([b.samples for b in blocks + sd.close()])
    assert np.array_equal(out, enc.reconstruction)


@pytest.mark.parametrize("version", [5, 6])
@pytest.mark.parametrize("multi", [False, True])
def test_a_spliced_stream_is_what_one_packing_gives(multi, version):
    # The encoder packs the plain coding, packs the frames that may be predicted again and
    # splices the cheaper frame of each; parsing the stream and packing its rows in one
    # call must give the same bytes (frames whose prediction was kept and frames without).
    x = _periodic(64 * 40, 2, seed=3)
    x[: 64 * 16, 1] = np.random.default_rng(4).normal(size=64 * 16).cumsum()  # no period
    if version == 6:  # bursts on a flat line: blocks on the Haar basis beside predicted ones
        x[64 * 16 : 64 * 32, 1] = np.where(np.arange(64 * 16) % 97 == 5, 9.0, 0.0)
    enc = codec.encode(x, codec.Profile(frame_length=64, multi_channel_frames=multi,
                                        layout_version=version))
    prof = enc.profile
    loc = locate_frames(enc.data)
    p = parse_frames_v3(enc.data, loc.offsets, loc.lengths, 64, 2, True, version=version,
                        switch=version == 6)
    assert version == 5 or p.row_alternate.any()
    predicted = np.bincount(p.row_frame, p.row_lag > 0) > 0
    assert predicted.any() and (multi or not predicted.all())  # single-channel: a mix
    seq = p.sequence[p.row_frame] + p.row_offset  # fewer than 256 windows: no wrap
    order = np.lexsort((p.row_channel, seq))
    coded = CodedFrames(
        channel=p.row_channel[order], sequence=seq[order], valid=p.row_valid[order],
        step_code=p.row_step[order], mean=p.row_mean[order], q=p.q[order],
        profile_id=profile_id(prof), n=64, channels=2, basis_code=codec.as_basis("dct", 64).code,
        multi=multi,
        windows_per_frame=prof.windows_per_frame, lag=p.row_lag[order],
        alternate=None if p.row_alternate is None else p.row_alternate[order])
    again = layout_for(version).pack(coded, codec.frame_key(prof))
    assert again.data == enc.data
    assert again.header_bits == round(enc.report["header_bits_per_sample"] * x.size)


@pytest.mark.parametrize("multi", [False, True])
def test_every_v5_frame_decodes_on_its_own(multi):
    # a prediction never reaches before its frame's first window
    x = _periodic(64 * 12, 2, seed=7)
    enc = codec.encode(x, codec.Profile(frame_length=64, layout_version=5, windows_per_frame=4,
                                        multi_channel_frames=multi))
    covered = np.zeros(x.shape, bool)
    for off, ln in _frames(enc.data):
        dec = codec.decode(enc.data[off : off + ln], enc.profile, samples=x.shape[0])
        ok = dec.delivered
        assert np.array_equal(dec.samples[ok], enc.reconstruction[ok])
        covered |= ok
    assert covered.all()


def _set_bits(frame_wo_crc: bytes, at: int, width: int, value: int) -> bytes:
    """``value`` in ``width`` bits at bit ``at`` after the sync marker."""
    bits = "".join(format(b, "08b") for b in frame_wo_crc[2:])
    bits = bits[:at] + format(value, f"0{width}b") + bits[at + width :]
    return frame_wo_crc[:2] + int(bits, 2).to_bytes(len(frame_wo_crc) - 2, "big")


def test_hostile_lag_fields_decode_by_the_rule_or_are_refused():
    # A sender who knows the key writes every lag (7 bits: 0 .. 127) and either flag bit,
    # CRC rebuilt.  Lags 1 .. 8 can reach window 1 (lag <= 1 x N): the flag is read and the
    # rule applies.  Larger lags cannot: no flag is read and nothing is predicted, so no
    # sample before the frame is ever read.
    for lag in range(128):
        for flag in (0, 1):
            body = _set_bits(_set_bits(EXAMPLE5, LAG_AT, 7, lag), FLAG_AT, 1, flag)
            got = _decode_example(with_crc(body, EXAMPLE_DIGEST))
            if got is None:
                continue
            pred = flag if 1 <= lag <= 8 else 0
            np.testing.assert_allclose(got, _expected_samples(lag, pred), rtol=0, atol=1e-12)
            if lag == 0 or lag > 8:
                assert got[1].tolist() == [0.0] * 8


def test_hostile_header_bits_never_crash_the_decoder():
    # every single bit of a real layout-5 frame's header flipped, CRC rebuilt: the decoder
    # refuses the frame or decodes it, never raises
    x = _periodic(64 * 4, 2, seed=3)
    enc = codec.encode(x, codec.Profile(frame_length=64, layout_version=5, windows_per_frame=4,
                                        multi_channel_frames=True))
    frames = [enc.data[o : o + n] for o, n in _frames(enc.data)]
    frame = frames[0]
    p = parse_frames_v3(frame, np.array([0]), np.array([len(frame)]), 64, 2, True, version=5)
    assert (p.row_lag > 0).any()  # the frame is predicted
    digest = digest_of(enc.profile)
    for bit in range(16, 8 * min(len(frame) - 2, 40)):
        body = bytearray(frame[:-2])
        body[bit // 8] ^= 0x80 >> (bit % 8)
        hostile = with_crc(bytes(body), digest)
        dec = codec.decode(hostile, enc.profile, samples=x.shape[0], strict=False)
        assert np.isfinite(dec.samples[dec.delivered]).all()
