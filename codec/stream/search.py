"""Finding frames in a byte stream, and ordering them by sequence number.

A receiver sees bytes, not frames.  :class:`FrameScanner` walks the stream: at
each position it expects a sync marker, asks the layout's envelope rule
(:func:`codec.layouts.envelope.frame_extent`) how long the frame claims to be and checks
its CRC under the profile's key (:func:`codec.layouts.envelope.frame_crc_ok`).  A frame
that passes is accepted and the walk jumps over it; otherwise the walk searches
forward from the byte after the failed candidate, so garbage, a truncated
frame, a bit slip or a false sync marker inside payload bytes costs only that
candidate.  The scanner takes
bytes in chunks of any size and gives exactly the same frames, failures and
skipped-byte count as one call on the whole stream (:func:`locate_frames` is
that one call), holding at most one frame (at most ``max_frame`` bytes, which
the streaming decoder derives from the profile) plus the current chunk.

:class:`SequenceTracker` turns 16-bit sequence numbers into time windows and
applies the duplicate / out-of-order policy, written down here once:

* The *head* is the highest window accepted so far.  A frame's window is the
  one nearest the head whose number is congruent to its sequence number modulo
  the field's range M (65 536 in layout 1, 256 in layouts 2 to 4; serial-number
  arithmetic in the manner of RFC 1982), so the counter may wrap any number
  of times as long as frames are less than M/2 windows from the head.
* A frame up to ``reorder`` windows behind the head is placed where it belongs
  (out-of-order delivery is repaired).  A frame further behind arrives after
  its window was released and is dropped as ``late``.
* The first frame for a (window, channel) wins; another copy is dropped as a
  ``duplicate`` (or ``conflict`` when its bytes differ: a replay or a
  stream from another encoder run).
* With a known stream length (the stream note), frames for windows past the
  end are dropped as ``beyond_end``; a frame claiming a window before 0 is
  dropped as ``before_start``.
* With the end unknown and ``max_fill`` set, a frame more than ``max_fill``
  windows past the head (or a first frame further than that from window 0)
  is placed ``max_fill`` windows after it: the windows in between are lost,
  the ones beyond are cut out of the output as a *discontinuity* (one CRC-valid
  frame with a far sequence number cannot make the output grow by more than
  ``max_fill`` windows).  Later sequence numbers are read relative to the cut.

Per-sample accounting uses the codes of :mod:`codec._status` (lost, delivered,
gap; concealed is set only by receivers that fill lost spans).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

# HEADER_BYTES: the envelope rule answers from at most this many bytes after the
# sync marker, so a streaming scanner that waits for them decides as a whole-stream one.
from ..layouts.crc import crc16_prefix_states
from ..layouts.envelope import EXTENT_BYTES as HEADER_BYTES
from ..layouts.envelope import SYNC, FrameKey, frame_extents, frames_crc_ok

__all__ = [
    "Located",
    "FrameScanner",
    "locate_frames",
    "SequenceTracker",
]

#: CRC-failure offsets listed by a scanner (later ones are only counted: bounded memory).
MAX_LISTED = 100_000
_SYNC_LEN = len(SYNC)


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
    frames : list of bytes
        The accepted frames themselves, in stream order.

    Examples
    --------
    Made by :func:`locate_frames`; a damaged frame is passed over and counted:

    >>> import numpy as np, codec
    >>> enc = codec.encode(np.zeros((2048, 1)), codec.default_profile())  # two frames
    >>> frames = codec.locate_frames(enc.data, codec.frame_key(enc.profile)).frames
    >>> bad = bytearray(frames[0])
    >>> bad[-1] ^= 1  # one bit of the CRC
    >>> loc = codec.locate_frames(bytes(bad) + frames[1], codec.frame_key(enc.profile))
    >>> len(loc.frames), loc.crc_failures, loc.skipped_bytes == len(bad)
    (1, [0], True)
    """

    offsets: np.ndarray
    lengths: np.ndarray
    crc_failures: list[int] = field(default_factory=list)
    skipped_bytes: int = 0
    frames: list[bytes] = field(default_factory=list)


class FrameScanner:
    """Incremental frame search over bytes fed in chunks of any size.

    :meth:`feed` returns the CRC-valid frames completed by the chunk as
    ``(stream_offset, frame_bytes)`` pairs; :meth:`close` ends the stream (a
    candidate still waiting for bytes is then a failure, exactly as a
    truncated frame at the end of a whole stream).  ``crc_failures`` and
    ``skipped_bytes`` accumulate as in :class:`Located`.  ``key`` is the
    profile's share of every CRC (:class:`codec.layouts.envelope.FrameKey`): frames of
    another profile fail like damaged ones.  Without a key no CRC can be
    checked: the scanner then only splits a stream as its envelopes claim
    (for a sender's own freshly written stream: sending, byte stuffing,
    counting frames); nothing may be decoded from such frames.

    The work is linear in the bytes fed: every candidate in the buffer is
    judged at once (envelope rule and CRC from prefix CRC states,
    :func:`codec.layouts.envelope.frames_crc_ok`, at the same cost whatever length it
    claims), and the walk then moves frame by frame, jumping over failed
    candidates.
    """

    def __init__(self, max_frame: int | None = None, *, key: FrameKey | None = None) -> None:
        #: Longest frame accepted; a candidate claiming more is treated as not a frame, so
        #: the buffer never waits for more than this (the long form of layouts 2 to 4 can claim
        #: 2^27).
        self.max_frame = max_frame
        self.key = key
        self._buf = bytearray()
        # CRC-16 register states before each byte of _buf and after the last (extended as
        # bytes arrive, trimmed with _buf): any candidate's CRC is two lookups away.
        self._states = np.full(1, 0xFFFF, dtype=np.uint16)
        self._base = 0  # stream offset of _buf[0]
        self._pos = 0  # index in _buf where the walk stands
        self._expected = True  # _pos is a frame boundary (not found by searching)
        self._need = 0  # bytes _buf must hold before the walk can move on
        self.crc_failures: list[int] = []  # offsets, the first MAX_LISTED of them
        self.crc_failure_count = 0
        self.skipped_bytes = 0
        self.bytes_in = 0

    def feed(self, chunk: bytes | bytearray | memoryview) -> list[tuple[int, bytes]]:
        """Add bytes; return the frames they complete."""
        try:
            self._buf += chunk
        except BufferError:  # a view of the buffer is still held (see _trim): grow a copy
            self._buf = self._buf + chunk
        self.bytes_in += len(chunk)
        if self.key is not None and len(chunk):
            more = crc16_prefix_states(np.frombuffer(bytes(chunk), dtype=np.uint8),
                                       int(self._states[-1]))
            self._states = np.concatenate([self._states, more[1:]])
        if len(self._buf) < self._need:
            return []
        out = self._walk(final=False)
        self._trim()
        return out

    def close(self) -> list[tuple[int, bytes]]:
        """End of stream: settle every waiting candidate; return the last frames."""
        out = self._walk(final=True)
        self._trim()
        return out

    def _judge(self, u: np.ndarray, start: int, final: bool
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Every sync marker at or after ``start``: position, length, need, wait, ok."""
        size = u.size
        sp = np.flatnonzero((u[start:-1] == SYNC[0]) & (u[start + 1 :] == SYNC[1])) + start
        length, need = frame_extents(u, sp)
        if self.max_frame is not None:
            length = np.where(length > self.max_frame, -1, length)
        wait = np.zeros(sp.size, dtype=bool)
        if not final:
            wait = ((length < 0) & (size - sp < HEADER_BYTES)) | (
                (length >= 0) & (sp + length > size))
        ok = np.zeros(sp.size, dtype=bool)
        whole = np.flatnonzero((length >= 0) & (sp + length <= size))
        if self.key is None:  # no profile: envelopes as claimed, CRCs unchecked
            ok[whole] = True
        elif whole.size:
            ok[whole] = frames_crc_ok(self._states, u, sp[whole], length[whole], self.key)
        return sp, length, need, wait, ok

    def _walk(self, final: bool) -> list[tuple[int, bytes]]:
        out: list[tuple[int, bytes]] = []
        u = np.frombuffer(bytes(self._buf), dtype=np.uint8)  # a copy: _buf stays resizable
        size = u.size
        pos = self._pos
        sp, length, need, wait, ok = self._judge(u, pos, final)
        live = sp[ok | wait]  # candidates the walk must stop at (failures are jumped over)
        while True:
            if pos >= size:
                self._need = size + 1
                break
            i = int(np.searchsorted(sp, pos))
            if i >= sp.size or sp[i] != pos:  # no marker here: search forward
                if not final and size - pos < _SYNC_LEN and SYNC.startswith(u[pos:].tobytes()):
                    self._need = pos + _SYNC_LEN  # maybe the start of a marker
                    break
                pos = self._jump(pos, pos + 1, u, sp, live, final)
                continue
            if wait[i]:
                self._need = pos + (int(length[i]) if length[i] >= 0 else HEADER_BYTES)
                break
            if ok[i]:
                n = int(length[i])
                out.append((self._base + pos, u[pos : pos + n].tobytes()))
                pos += n
                self._expected = True
                continue
            if self._expected:
                self.crc_failure_count += 1
                if len(self.crc_failures) < MAX_LISTED:
                    self.crc_failures.append(self._base + pos)
            pos = self._jump(pos, pos + 1, u, sp, live, final)
        self._pos = pos
        return out

    def _jump(self, was: int, start: int, u: np.ndarray, sp: np.ndarray, live: np.ndarray,
              final: bool) -> int:
        """The next marker at or after ``start`` that is not a failure; count skipped bytes.

        Markers whose candidates fail are passed over as a search from each of
        them would pass them (they are not at an expected frame boundary, so
        they are not listed as failures).
        """
        size = u.size
        k = int(np.searchsorted(live, start))
        if k < live.size:
            nxt = int(live[k])
        else:
            after = sp[sp >= start]
            st = int(after[-1]) + 1 if after.size else start
            # Keep a trailing byte that may be the first half of a marker.
            keep = 0 if final else _partial_sync_tail(u, max(st, size - _SYNC_LEN + 1))
            nxt = size - keep
            self._need = size + 1
        self.skipped_bytes += nxt - was
        self._expected = False
        return nxt

    def _trim(self) -> None:
        drop = self._pos
        if drop:
            try:
                del self._buf[:drop]
            except BufferError:
                # Something still holds a view of the buffer: a sampling profiler (Dask's
                # workers run one) or a debugger that keeps a frame, and with it a slice
                # passed to the CRC, alive for a moment.  Then start a new buffer instead.
                self._buf = self._buf[drop:]
            if self.key is not None:
                self._states = self._states[drop:].copy()
            self._base += drop
            self._need = max(0, self._need - drop)
            self._pos = 0


def _partial_sync_tail(buf: np.ndarray, start: int) -> int:
    """Bytes at the end of ``buf`` (from ``start``) that could begin a sync marker."""
    for k in range(min(_SYNC_LEN - 1, len(buf) - start), 0, -1):
        if SYNC.startswith(buf[-k:].tobytes()):
            return k
    return 0


def locate_frames(data: bytes, key: FrameKey | None = None,
                  max_frame: int | None = None) -> Located:
    """Locate every CRC-valid frame of the profile whose ``key`` is given in ``data``.

    One :class:`FrameScanner` pass; ``key`` is :func:`codec.frame_key`
    of the stream's profile (frames of another profile fail their CRC).
    Without ``key`` the frames are only split as their envelopes claim, CRCs
    unchecked: for a sender's own stream, never for decoding.

    Parameters
    ----------
    data : bytes
        A coded stream, or any part of one (bytes between frames are skipped).
    key : FrameKey, optional
        ``codec.frame_key(profile)`` of the stream's profile.
    max_frame : int, optional
        Largest frame length to accept, in bytes (see :func:`codec.max_frame_bytes`).

    Returns
    -------
    Located
        Offsets, lengths and bytes of the accepted frames, the offsets of
        candidates whose CRC failed, and the count of skipped bytes.

    Examples
    --------
    >>> import numpy as np, codec
    >>> x = np.sin(np.arange(256) / 9.0)[:, None]
    >>> enc = codec.encode(x, codec.default_profile())
    >>> loc = codec.locate_frames(b"junk" + enc.data, codec.frame_key(enc.profile))
    >>> int(loc.offsets[0]), loc.skipped_bytes, b"".join(loc.frames) == enc.data
    (4, 4, True)
    """
    scan = FrameScanner(max_frame, key=key)
    found = scan.feed(data) + scan.close()
    offsets = np.fromiter((o for o, _ in found), dtype=np.int64, count=len(found))
    lengths = np.fromiter((len(f) for _, f in found), dtype=np.int64, count=len(found))
    return Located(offsets, lengths, scan.crc_failures, scan.skipped_bytes,
                   [bytes(f) for _, f in found])


@dataclass
class SequenceTracker:
    """Sequence numbers -> windows, with the duplicate / out-of-order policy above.

    Parameters
    ----------
    reorder : int
        Windows a frame may arrive behind the head and still be placed.
    end_window : int or None
        First window past the end of the stream, when the length is known.
    """

    reorder: int = 16
    end_window: int | None = None
    head: int | None = None
    released: int = 0  # windows below this were handed out and are closed
    _seen: dict = field(default_factory=dict)  # (window, channel, kind) -> CRC of first copy
    #: With the end unknown, most lost windows a forward jump (or a first frame) may leave
    #: before it; windows beyond are a discontinuity, not output (None: no limit).
    max_fill: int | None = None
    #: Wire windows minus output windows: what discontinuities have cut out so far.
    shift: int = 0
    #: Windows the last :meth:`place` cut out (0: none).
    last_cut: int = 0

    def place(self, sequence: int, channel: int, kind: int, crc: int,
              modulus: int = 65536) -> tuple[int, str]:
        """Window of one frame (row) and the verdict: ``ok`` or why it is dropped.

        ``modulus`` is the range of the frame's sequence field (65 536 in layout
        1 and gap-mask frames, 256 in layouts 2 to 4: there a frame more than 128
        windows away from the head is ambiguous).
        """
        self.last_cut = 0
        if self.head is None:
            window = int(sequence) - self.shift  # the first frame fixes the unwrapping
            last = -1
        else:
            half = modulus // 2
            step = (int(sequence) - self.head - self.shift + half) % modulus - half
            window = self.head + step
            last = self.head
        if (self.max_fill is not None and self.end_window is None
                and window - last - 1 > self.max_fill):
            # A jump into the unknown: keep max_fill lost windows, cut the rest out.
            cut = window - last - 1 - self.max_fill
            window -= cut
            self.shift += cut
            self.last_cut = cut
        if window < 0:
            return window, "before_start"
        if self.end_window is not None and window >= self.end_window:
            return window, "beyond_end"
        if window < self.released:
            return window, "late"
        key = (window, int(channel), int(kind))
        first = self._seen.get(key)
        if first is not None:
            return window, "duplicate" if first == crc else "conflict"
        self._seen[key] = crc
        self.head = window if self.head is None else max(self.head, window)
        return window, "ok"

    def releasable(self, final: bool) -> int:
        """Windows below the returned one may be released (no frame can still land there)."""
        if self.head is None:
            return self.released
        return self.head + 1 if final else max(self.released, self.head - self.reorder + 1)

    def release(self, upto: int) -> None:
        """Close windows below ``upto`` and forget their duplicate keys (bounded memory).

        Keys of closed windows are never consulted again (a frame there is
        ``late`` before duplicates are looked up), so pruning changes no verdict.
        """
        self.released = max(self.released, upto)
        if len(self._seen) > 4 * 256 * (self.reorder + 2):
            self._seen = {k: v for k, v in self._seen.items() if k[0] >= self.released}
