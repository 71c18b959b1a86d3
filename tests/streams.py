"""Shared helpers for the stream tests: a small real stream and damage patterns."""

from __future__ import annotations

import numpy as np
from crcref import crc16_ibm3740_ref
from realdata import basic_motions

import codec
from codec._stream import locate_frames

__all__ = ["real_stream", "frames_of", "crc_ok_reference", "assert_accounting"]


def real_stream(samples: int = 600, channels: int = 3, n: int = 32, windows: int = 1, **enc):
    """Encode the first ``samples`` rows of real accelerometer data (BasicMotions).

    One window per frame by default, so damage patterns hit single windows.
    """
    x = basic_motions("train")[:samples, :channels]
    return x, codec.encode(x, codec.Profile(frame_length=n, windows_per_frame=windows), **enc)


def frames_of(data: bytes) -> list[tuple[int, int]]:
    loc = locate_frames(data)
    return list(zip(loc.offsets.tolist(), loc.lengths.tolist()))


def crc_ok_reference(frame: bytes) -> bool:
    """The frame's CRC-16/IBM-3740 checked by the implementation written from the catalogue
    parameters (tests/crcref.py), not by the standard-library function the codec wraps."""
    return crc16_ibm3740_ref(frame[2:-2]) == int.from_bytes(frame[-2:], "big")


def assert_accounting(dec, channels: int) -> None:
    """delivered + lost + gap (+ concealed) = samples x channels, per count and per array."""
    c = dec.counts
    total = c["samples_delivered"] + c["samples_lost"] + c["samples_gap"] + c["samples_concealed"]
    assert total == c["samples"] * channels == dec.status.size
    assert np.count_nonzero(dec.status == codec.DELIVERED) == c["samples_delivered"]
    assert np.array_equal(np.isnan(dec.samples), dec.status != codec.DELIVERED)
