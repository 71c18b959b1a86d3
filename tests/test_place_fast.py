"""The decoder's whole-array placing of in-order frames equals the row-by-row reference.

``codec.stream.live.StreamDecoder`` places runs of plain in-order frames at once
(``FAST_PLACE``) and every other frame row by row through
``SequenceTracker.place``, the written policy.  The reference here is that
per-row path itself (the fast path switched off): every stream -- clean,
damaged, reordered, duplicated, spliced with another encoder run's frames,
truncated, with forged far or wrapped sequence numbers (moduli 256 and 65 536),
``max_fill`` cuts, gap-mask frames -- must decode to the same samples (NaN
equal), statuses, counts, events in order and frame table.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from streams import with_crc

import codec
from codec.stream import live

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tools"))
import fuzz_mutations as fz  # noqa: E402  (its profiles, stream mutations and frame forgery)


def _decode(data, profile, monkeypatch, fast, **kw):
    monkeypatch.setattr(live, "FAST_PLACE", fast)
    return codec.decode(data, profile, strict=False, **kw)


def _same(a, b) -> None:
    assert np.array_equal(a.samples, b.samples, equal_nan=True)
    assert np.array_equal(a.status, b.status)
    assert np.array_equal(a.delivered, b.delivered)
    assert a.counts == b.counts
    assert a.events == b.events
    assert a.end_known == b.end_known
    assert a.crc_failures == b.crc_failures and a.skipped_bytes == b.skipped_bytes
    assert a.frames.keys() == b.frames.keys()
    for k in a.frames:
        assert np.array_equal(a.frames[k], b.frames[k]), k


def _both(data, profile, monkeypatch, **kw):
    fast = _decode(data, profile, monkeypatch, True, **kw)
    slow = _decode(data, profile, monkeypatch, False, **kw)
    _same(fast, slow)
    return fast


def _chunked(data, profile, monkeypatch, fast, sizes, **kw):
    """The streaming decoder fed ``data`` in chunks: its blocks, events and counts."""
    monkeypatch.setattr(live, "FAST_PLACE", fast)
    dec = live.StreamDecoder(profile, keep_frames=True, **kw)
    blocks, at, k = [], 0, 0
    while at < len(data):
        blocks += dec.feed(data[at : at + sizes[k % len(sizes)]])
        at += sizes[k % len(sizes)]
        k += 1
    blocks += dec.close()
    return ([(b.start, b.samples, b.status) for b in blocks], dec.events, dec.counts(),
            dec.frame_table())


def _both_chunked(data, profile, monkeypatch, sizes, **kw):
    a = _chunked(data, profile, monkeypatch, True, sizes, **kw)
    b = _chunked(data, profile, monkeypatch, False, sizes, **kw)
    assert len(a[0]) == len(b[0])
    for (s1, x1, t1), (s2, x2, t2) in zip(a[0], b[0]):
        assert s1 == s2 and np.array_equal(x1, x2, equal_nan=True) and np.array_equal(t1, t2)
    assert a[1] == b[1] and a[2] == b[2]
    for k in a[3]:
        assert np.array_equal(a[3][k], b[3][k]), k


def _long(layout: int, windows: int = 300, channels: int = 2, seed: int = 0, **prof):
    rng = np.random.default_rng(seed)
    n = 16
    x = np.cumsum(rng.standard_normal((windows * n - 5, channels)), axis=0)
    p = codec.Profile(frame_length=n, layout_version=layout, **prof).bind(
        [f"c{k}" for k in range(channels)])
    enc = codec.encode(x, p)
    return enc, codec.locate_frames(enc.data, codec.frame_key(enc.profile)).frames, x.shape[0]


def test_fast_path_runs_and_equals_reference_on_clean_streams(monkeypatch):
    taken = []
    real = live.StreamDecoder._place_run

    def spy(self, *a):
        k = real(self, *a)
        taken.append(k - a[1])
        return k

    monkeypatch.setattr(live.StreamDecoder, "_place_run", spy)
    for layout in (1, 2, 3, 4):
        enc, frames, samples = _long(layout)
        for s in (samples, None):
            dec = _both(enc.data, enc.profile, monkeypatch, samples=s)
            assert dec.delivered.all()
    # The fast path placed most frames (else this test would compare the reference with itself).
    assert sum(taken) > 0.9 * 4 * 2 * 2 * 300 / 2


@pytest.mark.parametrize("layout", [1, 2, 3, 4])
def test_reordered_duplicated_spliced_truncated(layout, monkeypatch):
    rng = np.random.default_rng(10 + layout)
    enc, frames, samples = _long(layout, seed=layout)
    other, oframes, _ = _long(layout, seed=99)  # another encoder run: conflicts
    for _trial in range(12):
        f = list(frames)
        for _ in range(int(rng.integers(1, 6))):
            op = int(rng.integers(0, 6))
            k = int(rng.integers(0, len(f)))
            if op == 0:  # local reordering (within and beyond the reorder depth)
                f.insert(min(len(f), k + int(rng.integers(1, 60))), f.pop(k))
            elif op == 1:  # duplicates
                f[k:k] = f[k : k + int(rng.integers(1, 8))]
            elif op == 2:  # a splice of the other run's frames
                a = int(rng.integers(0, len(oframes)))
                f[k:k] = oframes[a : a + int(rng.integers(1, 10))]
            elif op == 3:  # a dropped burst
                del f[k : k + int(rng.integers(1, 300))]
            elif op == 4:  # truncation
                f = f[: max(1, k)]
            else:  # a late replay of an early stretch
                f[k:k] = f[: int(rng.integers(1, 20))]
        data = b"".join(f)
        for kw in ({"samples": samples}, {"samples": None}, {"samples": None, "max_fill": 3},
                   {"samples": samples, "reorder": 0}, {"samples": None, "reorder": 1}):
            _both(data, enc.profile, monkeypatch, **kw)
        # Fed in chunks: runs start with the head, released windows and keys of earlier feeds.
        sizes = rng.integers(1, 3 * len(frames[0]), size=7).tolist()
        for kw in ({"samples": samples}, {"samples": None, "max_fill": 3, "reorder": 2}):
            _both_chunked(data, enc.profile, monkeypatch, sizes, **kw)


def _with_sequence(frame: bytes, seq: int, digest: bytes) -> bytes:
    """A layout 1 frame with its 16-bit sequence field rewritten and its CRC redone
    (field at bytes 8-9: the offsets tools/fuzz_mutations.py forges)."""
    f = bytearray(frame)
    f[8:10] = (seq & 0xFFFF).to_bytes(2, "big")
    return with_crc(bytes(f[:-2]), digest)


def test_sequence_wrap_and_far_jumps_modulus_65536(monkeypatch):
    enc, frames, samples = _long(1, windows=120, channels=1)
    digest = codec.frame_key(enc.profile).digest
    seqs = [int.from_bytes(f[8:10], "big") for f in frames]
    for start in (65500, 65530, 30000):
        f = [_with_sequence(fr, s + start, digest) for fr, s in zip(frames, seqs)]
        for kw in ({"samples": None}, {"samples": None, "max_fill": 5},
                   {"samples": samples}, {"samples": None, "max_fill": None}):
            _both(b"".join(f), enc.profile, monkeypatch, **kw)
        # far jumps mid-stream (cut with max_fill), then back
        g = list(f)
        g[40:60] = [_with_sequence(fr, s + start + 900, digest)
                    for fr, s in zip(frames[40:60], seqs[40:60])]
        for kw in ({"samples": None}, {"samples": None, "max_fill": 2}, {"samples": samples}):
            _both(b"".join(g), enc.profile, monkeypatch, **kw)


def _resequenced(frame: bytes, delta: int, digest: bytes) -> bytes:
    """The frame with ``delta`` added to its sequence number, CRC redone (field offsets
    as tools/fuzz_mutations.py forges them: layout 1 bytes 8-9, layouts 2 to 4 byte 5
    or 7 with the long length form)."""
    f = bytearray(frame)
    if f[2] >> 4 == 1:
        f[8:10] = ((int.from_bytes(f[8:10], "big") + delta) & 0xFFFF).to_bytes(2, "big")
    else:
        at = 7 if f[2] & 0x08 else 5
        f[at] = (f[at] + delta) & 0xFF
    return with_crc(bytes(f[:-2]), digest)


@pytest.mark.parametrize("layout", [1, 2, 3])
def test_forged_sequence_numbers_near_and_far(layout, monkeypatch):
    # Rows far from the head in either direction, behind window 0, across half the range.
    rng = np.random.default_rng(40 + layout)
    enc, frames, samples = _long(layout, windows=200)
    digest = codec.frame_key(enc.profile).digest
    for _trial in range(8):
        f = list(frames)
        for k in rng.choice(len(f), size=min(len(f), int(rng.integers(1, 30))),
                            replace=False).tolist():
            delta = int(rng.choice([rng.integers(-20, 21), rng.integers(-300, 301),
                                    rng.integers(0, 65536)]))
            f[k] = _resequenced(f[k], delta, digest)
        data = b"".join(f)
        for kw in ({"samples": samples}, {"samples": None}, {"samples": None, "max_fill": 4},
                   {"samples": samples, "reorder": 300}, {"samples": None, "reorder": 0}):
            _both(data, enc.profile, monkeypatch, **kw)


def test_fuzz_streams_of_every_profile(monkeypatch):
    rng = np.random.default_rng(5)
    cases = fz.build_cases(rng, list(range(len(fz.PROFILES))))
    for case in cases:
        for _ in range(40):
            data, _, _ = fz.mutate(rng, case)
            samples = case.samples if rng.random() < 0.5 else None
            kw = {"reorder": int(rng.choice([0, 1, 16]))}
            if rng.random() < 0.3:
                kw["max_fill"] = int(rng.integers(0, 4))
            _both(data, case.profile, monkeypatch, samples=samples, **kw)
