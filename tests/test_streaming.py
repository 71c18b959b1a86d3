"""Streaming encoder and decoder: any chunking gives the whole result; memory stays bounded."""

from __future__ import annotations

import tracemalloc

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from streams import assert_accounting, real_stream

import codec
from codec.stream.search import FrameScanner, locate_frames


def _stream_decode(data: bytes, profile, cuts, samples=None, reorder=16):
    dec = codec.StreamDecoder(profile, samples=samples, reorder=reorder)
    blocks, prev = [], 0
    for cut in list(cuts) + [len(data)]:
        blocks += dec.feed(data[prev:cut])
        prev = cut
    blocks += dec.close()
    starts = [b.start for b in blocks]
    assert starts == sorted(starts)
    vals = np.concatenate([b.samples for b in blocks])
    stat = np.concatenate([b.status for b in blocks])
    assert blocks[0].start == 0 and sum(b.samples.shape[0] for b in blocks) == vals.shape[0]
    return vals, stat, dec.counts()


def _damaged(data: bytes) -> bytes:
    """Garbage between frames, a truncated frame and a flipped bit (three damages)."""
    b = bytearray(data)
    b[400] ^= 0x04
    return bytes(b[:150]) + b"\xe3\x5a garbage \xe3" + bytes(b[150:700]) + bytes(b[760:])


def test_one_byte_chunks_equal_whole_stream():
    x, enc = real_stream(600, 3)
    for data in (enc.data, _damaged(enc.data)):
        whole = codec.decode(data, enc.profile, samples=600, strict=False)
        vals, stat, counts = _stream_decode(data, enc.profile, range(1, len(data)), samples=600)
        assert np.array_equal(vals, whole.samples, equal_nan=True)
        assert np.array_equal(stat, whole.status)
        assert counts == {k: v for k, v in whole.counts.items()}
        assert_accounting(whole, 3)
    assert np.array_equal(whole.samples[~np.isnan(whole.samples)],
                          enc.reconstruction[~np.isnan(whole.samples)])


@settings(max_examples=15, deadline=None)
@given(st.lists(st.integers(0, 3000), max_size=30), st.booleans())
def test_any_chunking_equals_whole(cuts, damage):
    _, enc = real_stream(300, 2, n=16)
    data = _damaged(enc.data) if damage else enc.data
    whole = codec.decode(data, enc.profile, strict=False)
    vals, stat, counts = _stream_decode(data, enc.profile, sorted(c % (len(data) + 1)
                                                                  for c in cuts))
    assert np.array_equal(vals, whole.samples, equal_nan=True)
    assert np.array_equal(stat, whole.status)
    assert counts["frames_ok"] == whole.counts["frames_ok"]


def test_scanner_matches_locate_frames_on_any_chunking():
    _, enc = real_stream(300, 2)
    data = _damaged(enc.data)
    key = codec.frame_key(enc.profile)
    ref = locate_frames(data, key)
    assert ref.offsets.size > 0 and ref.crc_failures  # the damage is seen, the rest found
    rng = np.random.default_rng(5)
    for _ in range(20):
        cuts = np.sort(rng.integers(0, len(data), size=rng.integers(1, 60)))
        scan = FrameScanner(key=key)
        found, prev = [], 0
        for cut in list(cuts) + [len(data)]:
            found += scan.feed(data[prev:cut])
            prev = cut
        found += scan.close()
        assert [o for o, _ in found] == ref.offsets.tolist()
        assert scan.crc_failures == ref.crc_failures
        assert scan.skipped_bytes == ref.skipped_bytes


def test_stream_encoder_bytes_equal_batch_encoder():
    x, enc = real_stream(600, 3)
    for block in (1, 7, 32, 33, 600):
        se = codec.StreamEncoder(enc.profile, 3)
        out = b"".join(se.feed(x[i : i + block]) for i in range(0, 600, block)) + se.close()
        assert out == enc.data


def test_stream_encoder_emits_frames_as_soon_as_a_window_completes():
    x, enc = real_stream(96, 3)
    se = codec.StreamEncoder(enc.profile, 3)
    assert se.feed(x[:31]) == b""
    first = se.feed(x[31:32])
    assert len(locate_frames(first).offsets) == 3  # one frame per channel of window 0


def test_sequence_wraps_around_256_in_layout_v2():
    # Layout v2 keeps 8 bits of sequence: 700 windows wrap it twice.
    x = np.sin(np.arange(1400) * 0.01)[:, None]
    enc = codec.encode(x, codec.Profile(frame_length=2, fidelity=0.9, layout_version=2))
    f = [enc.data[a : a + n] for a, n in zip(locate_frames(enc.data).offsets.tolist(),
                                            locate_frames(enc.data).lengths.tolist())]
    f[255], f[256] = f[256], f[255]  # out of order across the wrap
    dec = codec.decode(b"".join(f), enc.profile, samples=1400)
    assert dec.delivered.all() and dec.frames["sequence"].max() == 255
    assert np.array_equal(dec.samples, enc.reconstruction)


def test_sequence_wraps_around_65536_in_layout_v1():
    # 70 000 windows of N = 2 samples: sequence numbers wrap once (16-bit field).
    x = np.sin(np.arange(140_002) * 0.01)[:, None]
    enc = codec.encode(x, codec.Profile(frame_length=2, fidelity=0.9, layout_version=1))
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert dec.delivered.all()
    assert dec.frames["window"].max() == 70_000 and dec.frames["sequence"].max() == 65535
    assert np.array_equal(dec.samples, enc.reconstruction)


def test_reordered_and_duplicated_frames_by_policy():
    x, enc = real_stream(320, 1)  # 10 frames of one channel
    spans = [(o, o + n) for o, n in zip(*(locate_frames(enc.data).offsets.tolist(),
                                          locate_frames(enc.data).lengths.tolist()))]
    f = [enc.data[a:b] for a, b in spans]
    clean = codec.decode(enc.data, enc.profile, samples=320)
    swapped = b"".join([f[0], f[2], f[1], f[3], f[3]] + f[4:])
    dec = codec.decode(swapped, enc.profile, samples=320)
    assert np.array_equal(dec.samples, clean.samples)
    assert dec.counts["frames_duplicate"] == 1
    # A frame arriving more than `reorder` windows late is dropped as late, and counted lost.
    late = b"".join(f[1:]) + f[0]
    dec = codec.decode(late, enc.profile, samples=320, reorder=2)
    assert dec.counts["frames_late"] == 1 and not dec.delivered[:32].any()
    assert_accounting(dec, 1)
    # Another frame with the same sequence number and channel but other bytes: a conflict.
    other = codec.encode(x * 2, enc.profile)
    conflict = b"".join(f) + locate_frames_first(other.data)
    dec = codec.decode(conflict, enc.profile, samples=320, reorder=100)
    assert dec.counts["frames_conflict"] == 1 and np.array_equal(dec.samples, clean.samples)


def locate_frames_first(data: bytes) -> bytes:
    loc = locate_frames(data)
    return data[loc.offsets[0] : loc.offsets[0] + loc.lengths[0]]


def test_end_of_stream_losses_are_counted():
    x, enc = real_stream(600, 3)
    # 600 samples in 19 windows of 32; the frames of the last two windows are lost.
    cut = enc.data[: locate_frames(enc.data).offsets[-6]]
    known = codec.decode(cut, enc.profile, samples=600)
    assert known.samples.shape == (600, 3) and known.end_known
    assert known.counts["samples_lost"] == 3 * (600 - 17 * 32)
    unknown = codec.decode(cut, enc.profile)  # no stream note: the end cannot be known
    assert not unknown.end_known and unknown.samples.shape[0] == 17 * 32
    full = codec.decode(enc.data, enc.profile)  # a short last frame fixes the end
    assert full.end_known and full.samples.shape[0] == 600


def _peak(profile, data, chunk):
    tracemalloc.start()
    dec = codec.StreamDecoder(profile)
    for i in range(0, len(data), chunk):
        dec.feed(data[i : i + chunk])  # blocks dropped at once, as a live writer would
    dec.close()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak


def test_streaming_decoder_memory_does_not_grow_with_stream_length():
    x = np.cumsum(np.random.default_rng(3).normal(size=(64 * 400, 2)), axis=0)
    # Layout v1: its per-call cost is small, so the many small feeds stay fast.
    enc = codec.encode(x, codec.Profile(frame_length=64, layout_version=1))
    short = enc.data[: len(enc.data) // 10]
    p_short = _peak(enc.profile, short, 997)
    p_long = _peak(enc.profile, enc.data, 997)
    # No growth with length, stated against the data rather than a byte count that moves
    # with the numpy version: the long stream is ten times the short one, so a decoder
    # that kept its output would hold 0.9 x.nbytes more at the peak; allow half of that.
    # (Measured with numpy 2: 0.18 MB short, 0.26 MB long, x.nbytes 0.41 MB.)
    assert p_long - p_short < 0.5 * x.nbytes
    # A generous absolute cap, only against a pathological copy per feed: 64 MB is some
    # 250 times the measured peak and far below what a small logger box has.
    assert p_long < 64 * 2**20
