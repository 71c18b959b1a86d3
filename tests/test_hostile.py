"""The decoder as a parser of untrusted input: random bytes, mutated streams, forged headers.

Properties checked on every input: only the project's documented errors
(CoefwireError subclasses) may escape; no sample comes from a frame whose CRC
fails (each accepted frame's CRC is re-checked with binascii, independent of the
codec); every sample is accounted for; memory stays below a stated limit.
The 10^4-stream run lives in tools/fuzz_mutations.py; here a smaller seeded set.
"""

from __future__ import annotations

import contextlib
import io
import tracemalloc

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from streams import assert_accounting, crc_ok_reference, digest_of, frames_of, real_stream, with_crc

import codec
from codec import CoefwireError
from codec.cli import main
from codec.layouts.envelope import SYNC
from codec.layouts.v1 import HEADER_FIELDS

X, ENC = real_stream(400, 2, n=32)
CLEAN = codec.decode(ENC.data, ENC.profile, samples=400)
DIGEST = digest_of(ENC.profile)


def _check(data: bytes, samples: int | None = 400) -> codec.DecodeResult:
    try:
        dec = codec.decode(data, ENC.profile, samples=samples, strict=False)
    except CoefwireError:
        pytest.fail("strict=False reports damage, it does not raise")
    assert_accounting(dec, 2)
    fr = dec.frames
    for off, length in zip(fr["offset"].tolist(), fr["length"].tolist()):
        assert crc_ok_reference(data[off : off + length], DIGEST)
    # A delivered sample is bit-exact the clean stream's (no CRC-valid forgery in these inputs).
    d = dec.status == codec.DELIVERED
    n = min(d.shape[0], CLEAN.samples.shape[0])
    assert np.array_equal(dec.samples[:n][d[:n]], CLEAN.samples[:n][d[:n]])
    return dec


def test_random_bytes_of_every_length_0_to_4096():
    rng = np.random.default_rng(2026)
    pool = rng.integers(0, 256, size=4096 + 4097, dtype=np.uint8).tobytes()
    for k in range(4097):
        dec = _check(pool[k : 2 * k], samples=None if k % 2 else 400)
        assert dec.counts["frames_ok"] == 0
    for k in range(0, 4097, 64):  # strict mode: the documented FrameError, nothing else
        with pytest.raises(codec.FrameError, match="no frame"):
            codec.decode(pool[k : 2 * k], ENC.profile)


def _mutate(rng, data: bytes) -> bytes:
    b = bytearray(data)
    for _ in range(rng.integers(1, 4)):
        op = rng.integers(0, 5)
        if op == 0 and b:  # bit flips
            for p in rng.integers(0, len(b), size=rng.integers(1, 4)):
                b[p] ^= 1 << int(rng.integers(0, 8))
        elif op == 1 and b:  # truncation
            b = b[: rng.integers(0, len(b))]
        elif op == 2:  # insertion of garbage (sometimes with a false sync marker)
            p = rng.integers(0, len(b) + 1)
            junk = rng.integers(0, 256, size=rng.integers(1, 40), dtype=np.uint8).tobytes()
            b[p:p] = (SYNC if rng.random() < 0.5 else b"") + junk
        elif op == 3 and b:  # duplication of a span
            a = rng.integers(0, len(b))
            e = min(len(b), a + rng.integers(1, 200))
            p = rng.integers(0, len(b) + 1)
            b[p:p] = b[a:e]
        elif op == 4 and b:  # deletion (a dropped span, e.g. a lost radio burst)
            a = rng.integers(0, len(b))
            del b[a : a + rng.integers(1, 60)]
    return bytes(b)


def test_mutated_valid_streams():
    rng = np.random.default_rng(7)
    for _ in range(100):  # the default layout; 10^4 in tools/fuzz_mutations.py
        _check(_mutate(rng, ENC.data))
    for version, count in ((1, 1000), (4, 300)):
        _check_mutations(rng, version, count)


def _check_mutations(rng, version, count):
    enc1 = codec.encode(X, codec.Profile(frame_length=32, layout_version=version))
    clean1 = codec.decode(enc1.data, enc1.profile, samples=400)
    for _ in range(count):
        data = _mutate(rng, enc1.data)
        dec = codec.decode(data, enc1.profile, samples=400, strict=False)
        assert_accounting(dec, 2)
        for off, n in zip(dec.frames["offset"].tolist(), dec.frames["length"].tolist()):
            assert crc_ok_reference(data[off : off + n], digest_of(enc1.profile))
        assert np.array_equal(dec.samples[dec.delivered], clean1.samples[dec.delivered])


@settings(max_examples=60, deadline=None)
@given(st.binary(max_size=600), st.integers(0, 4000))
def test_hypothesis_garbage_spliced_into_a_stream(junk, where):
    where = min(where, len(ENC.data))
    _check(ENC.data[:where] + junk + ENC.data[where:])


def test_memory_stays_bounded_on_hostile_input():
    rng = np.random.default_rng(11)
    data = b"".join(_mutate(rng, ENC.data) for _ in range(20)) + rng.bytes(100_000)
    tracemalloc.start()
    codec.decode(data, ENC.profile, samples=400, strict=False)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    # Stated limit: 8 MB for a 170 kB input (the input copy, one frame batch, 400 x 2 output).
    assert peak < 8_000_000


def test_damage_leaves_every_untouched_frame_bit_exact():
    spans = frames_of(ENC.data)
    f = [ENC.data[a : a + n] for a, n in spans]
    slip = bytearray(f[3])  # a bit slip: one bit lost inside frame 3, the rest shifted left
    bits = np.unpackbits(np.frombuffer(bytes(slip), np.uint8))
    slip = np.packbits(np.delete(bits, 40)).tobytes()[:-1]
    damaged = (b"".join(f[:2]) + b"\x00\xe3\x5a\xffjunk" + f[2][:-7] + slip
               + b"".join(f[4:]))
    dec = _check(damaged)
    lost = {(w, c) for w, c in [(1, 0), (1, 1)]}  # frames 2 and 3 are window 1's two channels
    for w in range(-(-400 // 32)):
        for c in range(2):
            seg = slice(32 * w, min(400, 32 * w + 32))
            if (w, c) in lost:
                assert (dec.status[seg, c] == codec.LOST).all()
            else:
                assert np.array_equal(dec.samples[seg, c], CLEAN.samples[seg, c])
    # Both damaged frames were found by searching after garbage, so they are skipped bytes.
    assert dec.counts["frames_ok"] == len(f) - 2 and dec.counts["bytes_skipped"] > 0


def _forge(frame: bytes, digest: bytes, **fields) -> bytes:
    """Rewrite header fields of a frame and give it a correct CRC (an adversary can)."""
    widths = [b for _, b, _ in HEADER_FIELDS]
    names = [k for k, _, _ in HEADER_FIELDS]
    bits = np.unpackbits(np.frombuffer(frame, np.uint8)).copy()
    pos = 16
    for name, w in zip(names, widths):
        if name in fields:
            v = fields[name]
            bits[pos : pos + w] = [(v >> (w - 1 - i)) & 1 for i in range(w)]
        pos += w
    return with_crc(np.packbits(bits).tobytes()[:-2], digest)


@pytest.mark.parametrize("fields, reason", [
    ({"terms": 8191}, "bad_header"),  # more terms than N: refused before any payload read
    ({"value_width": 63}, "bad_header"),
    ({"valid": 0}, "bad_header"),
    ({"valid": 5000}, "bad_header"),
    ({"channel": 200}, "bad_header"),
    ({"length": 65535}, None),  # claims more bytes than exist: CRC cannot be checked
    ({"profile": 0x1234}, "foreign_profile"),
    ({"flags": 8}, "bad_header"),
    ({"basis": 3}, "bad_header"),
])
def test_forged_headers_become_events(fields, reason):
    # Layout v1 (fixed header fields); the v2 parser is exercised below without the CRC gate.
    enc1 = codec.encode(X, codec.Profile(frame_length=32, layout_version=1))
    f = [enc1.data[a : a + n] for a, n in frames_of(enc1.data)]
    forged = _forge(f[0], digest_of(enc1.profile), **fields)
    dec = codec.decode(forged + b"".join(f[1:]), enc1.profile, samples=400, strict=False)
    assert_accounting(dec, 2)
    assert not dec.delivered[:32, 0].any()
    if reason:
        assert dec.counts[f"frames_{reason}"] == 1
        assert dec.events[0]["event"] == reason and dec.events[0]["offset"] == 0


def test_all_frames_foreign_is_a_clear_error_when_strict():
    other = ENC.profile.override(fidelity=0.5)
    with pytest.raises(codec.FrameError, match="profile"):
        codec.decode(ENC.data, other)


def test_profile_file_is_data_only(tmp_path):
    # TOML has no include or code; unknown keys are refused by the schema (extra="forbid").
    p = tmp_path / "evil.toml"
    p.write_text('frame_length = 64\ninclude = "/etc/passwd"\n', encoding="utf-8")
    with pytest.raises(codec.ProfileError, match="unknown key 'include'"):
        codec.load_profile(p)
    p.write_text('basis = "__import__(\'os\').system(\'true\')"\n', encoding="utf-8")
    with pytest.raises(codec.ProfileError, match="unknown basis"):
        codec.load_profile(p)
    p.write_bytes(b"\x00\xff\xfe binary")
    with pytest.raises(codec.ProfileError):
        codec.load_profile(p)


def _run(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        rc = main(argv)
    return rc, out.getvalue(), err.getvalue()


@pytest.mark.parametrize("damage", ["random", "truncated", "bitflip"])
def test_cli_decode_reports_on_damaged_streams(tmp_path, damage):
    src = tmp_path / "in.csv"
    np.savetxt(src, X, delimiter=",", header="a,b", comments="")
    stream = tmp_path / "s.bin"
    assert _run(["encode", str(src), "-o", str(stream), "--frame-length", "32"])[0] == 0
    data = stream.read_bytes()
    rng = np.random.default_rng(3)
    bad = {"random": rng.bytes(len(data)), "truncated": data[: len(data) // 2 + 3],
           "bitflip": bytes(b ^ (1 << 3) if i % 97 == 5 else b for i, b in enumerate(data))}
    stream.write_bytes(bad[damage])
    rc, out, err = _run(["decode", str(stream), "-o", str(tmp_path / "o.csv"),
                         "--json", str(tmp_path / "r.json")])
    # Exit 1: samples were lost (the README's decode contract), never a traceback.
    assert rc == 1 and "Traceback" not in err
    import json

    rep = json.loads((tmp_path / "r.json").read_text())
    assert rep["samples"] == 400
    assert rep["samples_delivered"] + rep["samples_lost"] + rep["samples_gap"] == 800
    assert "lost" in out


@pytest.mark.parametrize("version", [1, 2, 15])
def test_frame_interpreter_never_raises_on_crc_valid_garbage(version):
    # Past the CRC gate an adversary controls every byte: build frames with a right
    # envelope, random contents and a correct CRC, and hand them to the interpreter.
    from codec.layouts.envelope import frame_extent
    from codec.stream.frames import decode_frames

    rng = np.random.default_rng(version)
    basis = codec.as_basis(ENC.profile.basis, ENC.profile.frame_length)
    frames = []
    for _ in range(400):
        size = int(rng.integers(8, 300))
        body = bytearray(rng.bytes(size))
        body[0] = (version << 4) | (body[0] & 0x0F if version == 2 else 0)
        if version == 2:
            body[0] &= 0xF7  # short length form: 11 bits
            body[0] = (body[0] & 0xF8) | ((size + 4) >> 8 & 0x07)
            body[1] = (size + 4) & 0xFF
            if rng.random() < 0.9:  # mostly our profile byte, to reach the payload parser
                body[2] = codec.profile_id(ENC.profile) & 0xFF
                body[4] &= 0x7F if rng.random() < 0.5 else 0xFF
        else:
            body[1:3] = (size + 4).to_bytes(2, "big")
            if version == 1 and rng.random() < 0.9:
                body[3:5] = codec.profile_id(ENC.profile).to_bytes(2, "big")
        frame = with_crc(SYNC + bytes(body), DIGEST)
        if frame_extent(memoryview(frame), 0) == len(frame):
            frames.append(frame)
    assert len(frames) > 300
    fr = decode_frames(frames, ENC.profile, basis)  # must not raise
    assert len(fr.verdict) == len(frames)
    assert sum(v != "foreign_profile" for v in fr.verdict) > 200  # the parsers were reached
    ok_rows = np.isin(fr.row_frame, np.flatnonzero(np.array(fr.verdict) == "ok"))
    assert np.isfinite(fr.rows[ok_rows]).all()
