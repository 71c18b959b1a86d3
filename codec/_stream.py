"""Finding frames in a byte stream.

A receiver sees bytes, not frames.  :func:`locate_frames` walks the stream: at
each position it expects a sync marker, reads the length field and checks the
CRC.  A frame that passes is accepted and the walk jumps over it; otherwise
the walk searches forward for the next sync marker, so garbage, a truncated
frame or a corrupted frame costs only itself.  A false sync marker inside
payload bytes is rejected by the CRC.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ._layout import SYNC, frame_crc_ok, frame_extent

__all__ = ["Located", "locate_frames"]


@dataclass
class Located:
    """Where frames start, and what was passed over.

    Attributes
    ----------
    offsets : ndarray
        Byte offset of every frame whose CRC checks.
    lengths : ndarray
        Their lengths in bytes.
    crc_failures : list of int
        Offsets of frame candidates at an expected frame boundary whose CRC failed.
    skipped_bytes : int
        Bytes that belong to no accepted frame.
    """

    offsets: np.ndarray
    lengths: np.ndarray
    crc_failures: list[int] = field(default_factory=list)
    skipped_bytes: int = 0


def locate_frames(data: bytes) -> Located:
    """Locate every CRC-valid frame in ``data``."""
    mv = memoryview(data)
    size = len(data)
    offsets: list[int] = []
    lengths: list[int] = []
    failures: list[int] = []
    pos = data.find(SYNC)
    skipped = size if pos < 0 else pos
    expected = True  # pos is where a frame should start (not found by searching)
    if pos > 0:
        expected = False
    while 0 <= pos < size:
        length = frame_extent(mv, pos)
        if length is not None and frame_crc_ok(mv, pos, length):
            end = pos + length
            offsets.append(pos)
            lengths.append(length)
            pos = end
            expected = True
            if pos < size and mv[pos : pos + len(SYNC)] != SYNC:
                nxt = data.find(SYNC, pos)
                skipped += (size if nxt < 0 else nxt) - pos
                pos, expected = nxt, False
            continue
        if expected:
            failures.append(pos)
        nxt = data.find(SYNC, pos + 1)
        skipped += (size if nxt < 0 else nxt) - pos
        pos, expected = nxt, False
    return Located(
        np.asarray(offsets, dtype=np.int64), np.asarray(lengths, dtype=np.int64), failures, skipped
    )
