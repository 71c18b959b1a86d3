"""Hostile frames that pass their CRC: counts bounded before allocation, foreign profiles,
sequence jumps with the end unknown, and arbitrary header fields (Hypothesis).

An adversary who knows the profile can give any frame a right CRC
(``streams.with_crc`` rebuilds the CRC with hashlib and binascii, independent
of the codec's prefix-state arithmetic).  Past the CRC every header field is
hostile; the decoder must bound each count by the profile and by the frame's
own length before it allocates anything.
"""

from __future__ import annotations

import contextlib
import io
import json
import tracemalloc

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from realdata import motion
from streams import assert_accounting, crc_ok_reference, digest_of, frames_of, with_crc

import codec
from codec.cli import main
from codec.layouts.envelope import SYNC
from codec.layouts.v1 import HEADER_FIELDS


def _bits(*fields: tuple[int, int]) -> str:
    return "".join(format(v, f"0{w}b") if w else "" for v, w in fields)


def _pack(bits: str, size: int) -> bytes:
    """``bits`` left-aligned in ``size`` bytes (zero bits after them)."""
    bits = bits[: 8 * size].ljust(8 * size, "0")
    return int(bits, 2).to_bytes(size, "big")


def _v3_frame(profile, sequence: int, windows: int, multi: bool, size: int,
              tail: bytes = b"", version: int = 3) -> bytes:
    """A CRC-valid frame of layout 3 or 4 (11-bit length) whose header claims what it is told.

    The header is written from the table in FRAME_LAYOUT.md ("Version 3"); the
    bits after it are ``tail`` (then zeros) up to the CRC.
    """
    pid8 = codec.profile_id(profile) & 0xFF
    head = _bits((version, 4), (0, 1), (size, 11), (pid8, 8), (sequence % 256, 8),
                 (windows - 1, 4), (int(multi), 1), (0, 1))
    body = _pack(head + "".join(format(b, "08b") for b in tail), size - 4)
    return with_crc(SYNC + body, digest_of(profile))


# ---------------------------------------------------------------------------------------
# Item 1: the "bomb" frame.  12 bytes, CRC-valid, header claiming 16 windows of every
# channel.  Before the counts were bounded, each made the parser allocate
# 16 x channels x N coefficients (here 16 x 8 x 1024 x 8 bytes = 1 MiB, four arrays of it)
# before any check; 600 in one datagram ran a receiver out of memory.
# ---------------------------------------------------------------------------------------

BOMB_PROFILE = codec.Profile(frame_length=1024, multi_channel_frames=True).bind(
    [f"c{i}" for i in range(8)])
BOMB = b"".join(_v3_frame(BOMB_PROFILE, s, 16, True, 12) for s in range(600))
# Memory cap: generous, from what the input can hold.  The 7 200 input bytes, the bit
# reader's 8 bytes per input byte, per-frame bookkeeping (a few hundred bytes each) and
# the decoder's fixed state come to well under 4 MB; 16 MB leaves room for numpy
# temporaries.  One claimed window set per frame alone would need 600 x 1 MiB.
BOMB_PEAK_BYTES = 16_000_000


def test_bomb_frame_is_twelve_crc_valid_bytes_claiming_sixteen_windows():
    assert len(BOMB) == 600 * 12
    f = BOMB[:12]
    assert crc_ok_reference(f, digest_of(BOMB_PROFILE))
    assert f[2] >> 4 == 3 and (f[6] >> 4) + 1 == 16 and (f[6] >> 3) & 1 == 1  # 16 windows, multi
    assert [n for _, n in frames_of(BOMB, BOMB_PROFILE)] == [12] * 600


def test_bomb_frames_in_process_bounded_memory():
    tracemalloc.start()
    dec = codec.decode(BOMB, BOMB_PROFILE, strict=False)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert dec.counts["frames_bad_header"] == 600 and dec.counts["frames_ok"] == 0
    assert dec.status.size == 0 and not dec.delivered.any()
    assert peak < BOMB_PEAK_BYTES, peak
    # the streaming decoder (a receiver's path), one datagram at a time
    sd = codec.StreamDecoder(BOMB_PROFILE)
    tracemalloc.start()
    for k in range(600):
        assert sd.feed(BOMB[12 * k : 12 * k + 12]) == []
    sd.close()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert sd.counts()["frames_bad_header"] == 600 and peak < BOMB_PEAK_BYTES


def test_bomb_frames_in_a_file_exit_2_with_one_sentence(tmp_path):
    stream = tmp_path / "bomb.cwire"
    stream.write_bytes(BOMB)
    codec.save_profile(BOMB_PROFILE, tmp_path / "bomb.cwire.profile.toml")
    argv = ["decode", str(stream), "-o", str(tmp_path / "o.csv")]
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        main(argv)  # a first run imports what the command needs (scipy...): not measured
    out, err = io.StringIO(), io.StringIO()
    tracemalloc.start()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main(argv)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert rc == 2 and "Traceback" not in err.getvalue() and "refused" in err.getvalue()
    assert not (tmp_path / "o.csv").exists()
    assert peak < BOMB_PEAK_BYTES, peak


def test_a_fitting_frame_of_sixteen_windows_still_decodes():
    # The bound refuses only what the frame's bytes cannot hold: a real 16-window
    # multi-channel frame of a constant signal (tiny subframes) decodes in full.
    prof = codec.Profile(frame_length=64, multi_channel_frames=True, windows_per_frame=16,
                         reference="total")
    x = np.ones((16 * 64, 8))
    enc = codec.encode(x, prof)
    assert len(frames_of(enc.data, enc.profile)) == 1
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert dec.delivered.all()
    np.testing.assert_array_equal(dec.samples, enc.reconstruction)


# ---------------------------------------------------------------------------------------
# Item 2: foreign profiles fail the CRC (implicit prefix), even when the 8-bit header id
# collides.
# ---------------------------------------------------------------------------------------

def _colliding_pair(layout: int) -> tuple[codec.Profile, codec.Profile]:
    """Two profiles whose 8-bit header ids are equal (found by search: about 1 in 256)."""
    a = codec.Profile(layout_version=layout, frame_length=32).bind(["a", "b"])
    want = codec.profile_id(a) & 0xFF
    for k in range(1, 5000):
        b = a.model_copy(update={"fidelity": 0.99 - k * 1e-5})
        if codec.profile_id(b) & 0xFF == want and codec.profile_id(b) != codec.profile_id(a):
            return a, b
    raise AssertionError("no colliding profile found in 5000 tries")  # p ~ e^-19


@pytest.mark.parametrize("layout", [2, 3, 4])
def test_colliding_profile_stream_delivers_nothing(layout):
    a, b = _colliding_pair(layout)
    x = np.cumsum(np.random.default_rng(3).normal(size=(640, 2)), axis=0)
    enc_b = codec.encode(x, b)
    # the frames' header id byte is A's own: only the CRC's profile prefix tells them apart
    offs = [o for o, _ in frames_of(enc_b.data)]
    assert all(enc_b.data[o + 4] == codec.profile_id(a) & 0xFF for o in offs)
    dec = codec.decode(enc_b.data, a, samples=640, strict=False)
    assert dec.counts["samples_delivered"] == 0 and dec.counts["frames_ok"] == 0
    assert dec.counts["frames_crc_failed"] >= 1
    assert_accounting(dec, 2)
    with pytest.raises(codec.FrameError, match="another profile"):
        codec.decode(enc_b.data, a, samples=640)
    # and B's own profile reads it
    assert codec.decode(enc_b.data, b, samples=640).delivered.all()


def test_profiles_differing_only_in_basis_are_told_apart():
    # Same canonical profile, so the same 16-bit identifier; the basis fingerprint in the
    # digest separates them (a trained basis that differs; here two built-in bases whose
    # header codes are equal cannot exist, so the digest is checked directly).
    from codec._profile import profile_digest
    from codec.transform.bases import basis_fingerprint

    p = codec.Profile(frame_length=32).bind(["a"])
    m = codec.as_basis("dct", 32).matrix
    moved = m.copy()
    moved[0, 0] += 1e-6  # more than rounding to 2**-32
    assert basis_fingerprint(m) != basis_fingerprint(moved)
    assert basis_fingerprint(m) == basis_fingerprint(m + 1e-13)  # within rounding
    assert profile_digest(p, basis_fingerprint(m)) != profile_digest(p, basis_fingerprint(moved))


def _gap_stream(profile):
    x = np.cumsum(np.random.default_rng(5).normal(size=(256, 2)), axis=0)
    x[40:50, 1] = np.nan
    return codec.encode(x, profile, gaps="mark")


def test_foreign_gap_frame_is_refused():
    prof = codec.Profile(frame_length=32).bind(["a", "b"])
    enc = _gap_stream(prof)
    spans = frames_of(enc.data, enc.profile)
    gaps = [(o, n) for o, n in spans if enc.data[o + 2] >> 4 == 15]
    assert len(gaps) == 1
    o, n = gaps[0]
    gap = enc.data[o : o + n]
    # (1) made under another profile: fails its CRC, nothing of it is delivered
    other = prof.model_copy(update={"fidelity": 0.5})
    foreign = _gap_stream(other)
    fo, fn = [(a, m) for a, m in frames_of(foreign.data) if foreign.data[a + 2] >> 4 == 15][0]
    spliced = enc.data[:o] + foreign.data[fo : fo + fn] + enc.data[o + n :]
    dec = codec.decode(spliced, prof, samples=256, strict=False)
    assert dec.counts["gap_frames_ok"] == 0 and dec.counts["frames_crc_failed"] == 1
    assert not dec.delivered[32:64, 1].any() and (dec.status == codec.GAP).sum() == 0
    # (2) our CRC but another profile's identifier in the wrapped data frame's header: the
    # inner frame's own profile check refuses the gap frame (FRAME_LAYOUT.md: the inner
    # frame follows the 5-byte gap header without its sync marker; a version-3 frame's
    # profile byte is its byte 4, so byte 5 + 4 - 2 = 7 of the gap frame)
    forged = bytearray(gap[:-2])
    forged[7] = (codec.profile_id(prof) + 1) % 256
    forged = with_crc(bytes(forged), digest_of(prof))
    dec = codec.decode(enc.data[:o] + forged + enc.data[o + n :], prof, samples=256,
                       strict=False)
    assert dec.counts["frames_foreign_profile"] == 1 and dec.counts["gap_frames_ok"] == 0
    assert not dec.delivered[32:64, 1].any()
    assert_accounting(dec, 2)


# ---------------------------------------------------------------------------------------
# Item 4: a sequence jump with the end unknown adds at most the configured fill.
# ---------------------------------------------------------------------------------------

def _forge_v1(frame: bytes, digest: bytes, **fields) -> bytes:
    """Rewrite layout-1 header fields (table in FRAME_LAYOUT.md) and recompute the CRC."""
    bits = np.unpackbits(np.frombuffer(frame, np.uint8)).copy()
    pos = 16
    for name, w, _ in HEADER_FIELDS:
        if name in fields:
            v = fields[name]
            bits[pos : pos + w] = [(v >> (w - 1 - i)) & 1 for i in range(w)]
        pos += w
    return with_crc(np.packbits(bits).tobytes()[:-2], digest)


@pytest.mark.parametrize("fill", [None, 0, 5])
def test_sequence_jump_with_unknown_end_adds_at_most_the_fill(fill):
    prof = codec.Profile(frame_length=32, layout_version=1).bind(["a"])
    x = np.cumsum(np.random.default_rng(9).normal(size=(320, 1)), axis=0)  # 10 whole windows
    enc = codec.encode(x, prof)
    spans = frames_of(enc.data, enc.profile)
    jump = _forge_v1(enc.data[: spans[0][1]], digest_of(prof), sequence=32000)
    data = enc.data + jump
    limit = codec.stream.live.MAX_FILL_WINDOWS if fill is None else fill
    dec = codec.decode(data, prof, strict=False, max_fill=fill)
    # 10 windows, at most `limit` lost ones, then the jumped frame's window
    assert dec.status.shape[0] == 32 * (10 + limit + 1)
    assert dec.counts["discontinuities"] == 1
    assert dec.counts["windows_cut"] == 32000 - 10 - limit
    ev = [e for e in dec.events if e["event"] == "discontinuity"]
    assert ev and ev[0]["windows_cut"] == 32000 - 10 - limit
    assert dec.delivered[: 320].all() and dec.delivered[-32:].all()
    assert_accounting(dec, 1)
    # the streaming decoder, byte by byte, gives the same
    sd = codec.StreamDecoder(prof, max_fill=fill)
    blocks = [b for i in range(0, len(data), 7) for b in sd.feed(data[i : i + 7])] + sd.close()
    assert sum(b.samples.shape[0] for b in blocks) == dec.status.shape[0]
    # with the end known (stream note) the jump is simply beyond the end
    known = codec.decode(data, prof, samples=320, strict=False)
    assert known.status.shape[0] == 320 and known.counts["frames_beyond_end"] == 1


def test_first_frame_far_from_window_zero_is_cut_too():
    prof = codec.Profile(frame_length=32, layout_version=1).bind(["a"])
    x = np.cumsum(np.random.default_rng(2).normal(size=(64, 1)), axis=0)
    enc = codec.encode(x, prof)
    first = enc.data[: frames_of(enc.data, enc.profile)[0][1]]
    dec = codec.decode(_forge_v1(first, digest_of(prof), sequence=40000), prof, max_fill=3)
    assert dec.status.shape[0] == 32 * 4 and dec.delivered[-32:].all()
    assert dec.counts["windows_cut"] == 40000 - 3


# ---------------------------------------------------------------------------------------
# Item 9: arbitrary CRC-valid frames, header fields drawn from their full ranges.
# ---------------------------------------------------------------------------------------

HYP_PROFILE = codec.Profile(frame_length=256, reference="ac").bind([f"c{i}" for i in range(8)])
HYP_DIGEST = digest_of(HYP_PROFILE)
HYP_PID = codec.profile_id(HYP_PROFILE)
# Peak memory cap: the largest frame a draw makes is 2047 bytes; the most a frame can
# legitimately describe is 16 windows x 8 channels x 256 samples (2 MiB as int64 or
# float64), and the decoder holds about six arrays of that size per frame in flight
# (codes, lane output, synthesis, rows, released blocks) for at most 6 frames: 6 x 6 x
# 2 MiB = 72 MiB; with 8 MB of fixed state, 96 MB is generous.  Unbounded allocation
# (the bomb above) needs gigabytes.  Measured here: 1.6 MB at most over the 150 examples
# (one decode each); the cap is for what a frame may legitimately describe, not for them.
HYP_PEAK_BYTES = 96_000_000

_v234 = st.tuples(
    st.sampled_from([2, 3, 4]), st.booleans(), st.integers(0, 255), st.integers(0, 255),
    st.integers(1, 16), st.booleans(), st.integers(0, 255), st.booleans(),
    st.integers(0, 255), st.binary(max_size=2000), st.booleans())
_v1 = st.tuples(st.just(1), st.dictionaries(
    st.sampled_from([k for k, _, _ in HEADER_FIELDS if k not in ("version", "length")]),
    st.integers(0, 2**16 - 1)), st.binary(max_size=600), st.booleans())
_gap = st.tuples(st.just(15), st.integers(0, 15), st.one_of(_v234, _v1), st.binary(max_size=40))


def _draw_frame(spec) -> bytes:
    """A CRC-valid frame (length field true to its size) from drawn header fields."""
    if spec[0] == 1:
        _, fields, payload, ours = spec
        head = {k: 0 for k, _, _ in HEADER_FIELDS}
        head.update({k: v & ((1 << w) - 1) for (k, w, _) in HEADER_FIELDS
                     for kk, v in fields.items() if kk == k})
        head["version"] = 1
        if ours:
            head["profile"] = HYP_PID
        size = 17 + len(payload) + 2
        head["length"] = size
        bits = _bits(*[(head[k], w) for k, w, _ in HEADER_FIELDS])
        return with_crc(SYNC + _pack(bits, 15) + payload, HYP_DIGEST)
    if spec[0] == 15:  # a gap-mask frame (FRAME_LAYOUT.md): a drawn data frame and runs
        _, fmt, inner, runs = spec
        body = _draw_frame(inner)[len(SYNC) : -2] + runs
        size = len(SYNC) + 3 + len(body) + 2
        return with_crc(SYNC + _pack(_bits((15, 4), (fmt, 4), (size, 16)), 3) + body,
                        HYP_DIGEST)
    version, longf, pid8, seq, windows, multi, channel, short, valid, payload, ours = spec
    size = 4 + 3 + len(payload) + 2 + (2 if longf else 0)
    if longf:
        size = max(size, 2048)
        payload = payload.ljust(size - 2 - 7 - 2, b"\x00")
    lw = 27 if longf else 11
    pid8 = HYP_PID & 0xFF if ours else pid8
    head = [(version, 4), (int(longf), 1), (size, lw), (pid8, 8), (seq, 8)]
    if version == 2:
        head += [(int(multi), 1), (0 if multi else channel, 0 if multi else 8), (int(short), 1),
                 (valid & 0xFF if short else 0, 8 if short else 0)]
    else:
        head += [(windows - 1, 4), (int(multi), 1), (0 if multi else channel & 7,
                 0 if multi else 3), (int(short), 1), (valid & 0xFF if short else 0,
                 8 if short else 0)]
    bits = _bits(*head) + "".join(format(b, "08b") for b in payload)
    return with_crc(SYNC + _pack(bits, size - 4), HYP_DIGEST)


@settings(max_examples=150, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(st.lists(st.one_of(_v234, _v1, _gap), min_size=1, max_size=6))
def test_arbitrary_crc_valid_frames_raise_only_project_errors(specs):
    frames = [_draw_frame(s) for s in specs]
    data = b"".join(frames)
    assert len(frames_of(data, HYP_PROFILE)) == len(frames)  # every one passes the CRC
    tracemalloc.start()
    try:
        try:
            dec = codec.decode(data, HYP_PROFILE)
        except codec.CoefwireError:
            dec = codec.decode(data, HYP_PROFILE, strict=False)
        for window_data in (data[: len(data) // 2], data):  # and a prefix, end unknown
            codec.decode(window_data, HYP_PROFILE, strict=False)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < HYP_PEAK_BYTES, peak
    assert_accounting(dec, 8)
    assert np.isfinite(dec.samples[dec.delivered]).all()


# ---------------------------------------------------------------------------------------
# The fuzzer's verdict is its exit status (issue: it used to exit 0 whatever it found).
# ---------------------------------------------------------------------------------------

def _fuzzer(monkeypatch):
    import importlib
    from pathlib import Path

    monkeypatch.syspath_prepend(str(Path(__file__).resolve().parents[1] / "tools"))
    return importlib.import_module("fuzz_mutations")


def test_fuzzer_exits_0_when_clean_and_1_on_any_finding(monkeypatch, capsys):
    fm = _fuzzer(monkeypatch)
    monkeypatch.setattr("sys.argv", ["fuzz_mutations.py", "--streams", "12",
                                     "--profiles", "0,1"])
    assert fm.main() == 0
    assert "exceptions 0" in capsys.readouterr().out
    real_decode = codec.decode

    def leaky(data, profile, **kw):  # a decoder bug: one sample flagged delivered wrongly
        dec = real_decode(data, profile, **kw)
        lost = np.flatnonzero(dec.status.ravel() == codec.LOST)
        if lost.size:
            dec.status.ravel()[lost[0]] = codec.DELIVERED
        return dec

    monkeypatch.setattr(codec, "decode", leaky)
    assert fm.main() == 1
    assert "FINDING" in capsys.readouterr().out


def test_damaged_gap_frame_never_hands_out_its_inner_frame_as_data():
    # The inner data frame holds interpolated stand-ins at the gaps; when its gap-mask
    # frame fails the CRC the search resumes inside it.  The inner frame travels without
    # its sync marker and CRC (FRAME_LAYOUT.md), so no part of it passes on its own.
    prof = codec.Profile(frame_length=32).bind(["a", "b"])
    enc = _gap_stream(prof)
    o, n = [(a, m) for a, m in frames_of(enc.data, enc.profile) if enc.data[a + 2] >> 4 == 15][0]
    # every start inside that a receiver would try (a sync marker; any other start is
    # never read as a frame) and every end: none passes the profile's CRC.  (Any of the
    # ~n^2 / 2 substrings passes CRC-16 alone by chance, 2^-16 each: the sync marker,
    # not the CRC, keeps the inner frame's bytes from being searched at all.)
    starts = [at for at in range(o + 1, o + n - 4) if enc.data[at : at + 2] == SYNC]
    for at in starts:
        assert not any(crc_ok_reference(enc.data[at : b], digest_of(prof))
                       for b in range(at + 8, o + n + 1))
    damaged = bytearray(enc.data)
    damaged[o + n - 1] ^= 0x01  # the gap frame's CRC
    dec = codec.decode(bytes(damaged), prof, samples=256, strict=False)
    assert dec.counts["frames_crc_failed"] == 1 and dec.counts["gap_frames_ok"] == 0
    assert not dec.delivered[32:64, 1].any()  # the window with gaps: lost, not stand-ins
    assert dec.counts["frames_ok"] == len(frames_of(enc.data, enc.profile)) - 1


def test_decode_cli_max_fill_bounds_a_jump_with_the_end_unknown(tmp_path):
    # Two real stretches of one stream: windows 0-2, then windows 100-101 (a sequence
    # jump of 97 windows, well inside the sequence field's half range).  The note holds
    # the profile but no [stream] table, so the end is unknown: --max-fill 5 lets the
    # jump add 5 lost windows and cuts the rest.
    from codec._profile import save_profile

    n = 16
    x = motion("train")[: 5 * n, :1]
    prof = codec.Profile(frame_length=n, windows_per_frame=1).bind(["a"])
    a = codec.encode(x[: 3 * n], prof)
    b = codec.encode(x[3 * n :], prof, first_window=100)
    stream = tmp_path / "s.cwire"
    stream.write_bytes(a.data + b.data)
    save_profile(prof, tmp_path / "s.cwire.profile.toml")  # no [stream]: end unknown
    out, rep = tmp_path / "out.npy", tmp_path / "r.json"
    rc = main(["decode", str(stream), "-o", str(out), "--max-fill", "5", "--json", str(rep),
               "--quiet"])
    assert rc == 1  # the filled windows are lost samples
    got = np.load(out)
    assert got.shape == ((3 + 5 + 2) * n, 1)
    np.testing.assert_array_equal(got[: 3 * n], a.reconstruction)
    assert np.isnan(got[3 * n : 8 * n]).all()
    np.testing.assert_array_equal(got[8 * n :], b.reconstruction)
    r = json.loads(rep.read_text())
    assert r["discontinuities"] == 1 and r["windows_cut"] == 97 - 5
    assert main(["decode", str(stream), "-o", str(tmp_path / "o2.npy"), "--max-fill", "-1"]) == 2
