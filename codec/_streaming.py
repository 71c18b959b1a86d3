"""Live streams: an incremental encoder and an incremental decoder with bounded memory.

:class:`StreamEncoder` takes sample blocks of any size and returns the bytes of
every frame as soon as its time window is complete; it holds fewer than N
samples per channel between calls.  Frame coding is per frame, so the bytes
equal those of :func:`codec.encode` on the whole input (with the ``fill`` gap
policy interpolation only sees the samples of the current block; see below).

:class:`StreamDecoder` takes bytes in chunks of any size and returns decoded
sample blocks with a status per sample (``codec._stream`` codes), plus events
for everything that did not make it.  It holds one frame's bytes
(:class:`codec._stream.FrameScanner`), the windows within the reorder depth,
and a capped event list, whatever the input length.  Windows are released in
order once no frame can still land in them (the duplicate / out-of-order
policy of :class:`codec._stream.SequenceTracker`); the decision is made frame
by frame, so any chunking of the input gives the same output.

End of stream: with the stream note's sample count the end is known and every
lost frame is counted, even at the end.  Without it, a short last frame (valid
< N) also fixes the end; otherwise the output ends with the last window
received and ``end_known`` is False: frames lost after it cannot be counted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._codec import _bind, decode_frames, encode
from ._errors import ProfileError
from ._gaps import GAP_POLICIES
from ._layout import FLAG_GAP_MASK
from ._profile import Profile
from ._stream import DELIVERED, GAP, LOST, STATUS_NAMES, FrameScanner, SequenceTracker

__all__ = ["Block", "StreamDecoder", "StreamEncoder", "MAX_EVENTS"]

#: Events kept in detail; later ones are only counted.
MAX_EVENTS = 1000


@dataclass
class Block:
    """Decoded samples ``[start, start + len)`` of the stream, with their status codes."""

    start: int
    samples: np.ndarray
    status: np.ndarray


class _Window:
    """One time window being assembled: values, status and gap bookkeeping per channel."""

    __slots__ = ("values", "status", "flagged", "masks")

    def __init__(self, channels: int, n: int):
        self.values = np.full((channels, n), np.nan)
        self.status = np.full((channels, n), LOST, dtype=np.uint8)
        self.flagged = np.zeros(channels, dtype=bool)
        self.masks: dict[int, np.ndarray] = {}

    def settle(self) -> None:
        """Apply gap masks; a data frame announcing a mask that never came is not vouched for."""
        for c in np.flatnonzero(self.flagged):
            if int(c) not in self.masks:
                self.values[c] = np.nan
                self.status[c] = LOST
        for c, mask in self.masks.items():
            k = mask.size
            self.values[c, :k][mask] = np.nan
            self.status[c, :k][mask] = GAP


class StreamDecoder:
    """Incremental decoder: :meth:`feed` bytes, get :class:`Block` lists; :meth:`close` at the end.

    Parameters
    ----------
    profile : Profile
        The stream's profile, bound (one channel spec per column).
    samples : int, optional
        Samples in the stream (the stream note), when known.
    reorder : int
        Windows a frame may arrive behind the newest one and still be placed.
    keep_frames : bool
        Keep a table of every accepted frame (batch decoding); off for live
        streams, whose memory must not grow with their length.
    """

    def __init__(self, profile: Profile, samples: int | None = None, reorder: int = 16,
                 keep_frames: bool = False):
        if not profile.channels:
            raise ProfileError("the profile lists no channels; decode with the stream's own "
                               "profile")
        if reorder < 0:
            raise ValueError("reorder must be >= 0")
        self.profile = profile
        self.n = profile.frame_length
        self.channels = len(profile.channels)
        from ._bases import as_basis

        self.basis = as_basis(profile.basis, self.n)
        self.scanner = FrameScanner()
        self.end_sample = int(samples) if samples is not None else None
        end_window = None if samples is None else -(-int(samples) // self.n)
        self.tracker = SequenceTracker(reorder=reorder, end_window=end_window)
        self._windows: dict[int, _Window] = {}
        self.events: list[dict] = []
        self._frame_counts: dict[str, int] = {}
        self._sample_counts = dict.fromkeys(STATUS_NAMES.values(), 0)
        self._emitted = 0
        self._keep = keep_frames
        self._table: list[tuple] = []
        self._closed = False

    @property
    def end_known(self) -> bool:
        return self.end_sample is not None

    def complete(self) -> bool:
        """Whether every window up to the stream's known end has all its frames.

        A live receiver stops here instead of waiting for a timeout; always
        False while the end is unknown.
        """
        if self.end_sample is None:
            return False
        end = -(-self.end_sample // self.n)
        for win in range(self.tracker.released, end):
            w = self._windows.get(win)
            if w is None:
                return False
            have = (w.status != LOST).any(axis=1) | np.isin(np.arange(self.channels),
                                                             list(w.masks))
            if not have.all() or any(int(c) not in w.masks for c in np.flatnonzero(w.flagged)):
                return False
        return True

    # -- input ------------------------------------------------------------------------------
    def feed(self, chunk: bytes) -> list[Block]:
        """Bytes in; the blocks of samples they complete out."""
        if self._closed:
            raise ValueError("the decoder is closed")
        return self._frames(self.scanner.feed(chunk), final=False)

    def close(self) -> list[Block]:
        """End of stream: place the last frames and release every remaining window."""
        if self._closed:
            return []
        self._closed = True
        return self._frames(self.scanner.close(), final=True)

    def _frames(self, found: list[tuple[int, bytes]], final: bool) -> list[Block]:
        out: list[Block] = []
        if found:
            fr = decode_frames([f for _, f in found], self.profile, self.basis)
            for i, (offset, frame) in enumerate(found):  # one placement per frame
                self._place(i, offset, frame, fr)
                out += self._release(self.tracker.releasable(False))
        if final:
            if self.end_sample is None and self.tracker.head is not None:
                upto = self.tracker.head + 1
            else:
                upto = self.tracker.end_window or 0
            out += self._release(max(upto, self.tracker.released))
        return _join(out)

    def _place(self, i: int, offset: int, frame: bytes, fr) -> None:
        verdict = fr.verdict[i]
        kind = int(fr.kind[i])
        head = fr.head
        if verdict != "ok":
            self._event(verdict, offset, detail=fr.detail[i])
            return
        seq, ch, valid = int(head["sequence"][i]), int(head["channel"][i]), int(head["valid"][i])
        window, where = self.tracker.place(seq, ch, kind, int(fr.crc[i]))
        if where != "ok":
            self._event(where, offset, window=window, channel=ch)
            return
        self._count("frames_ok" if kind == 0 else "gap_frames_ok")
        w = self._windows.get(window)
        if w is None:
            w = self._windows[window] = _Window(self.channels, self.n)
        if kind == 1:
            w.masks[ch] = fr.masks[i]
        else:
            w.values[ch, :valid] = fr.rows[i, :valid]
            w.status[ch, :valid] = DELIVERED
            w.flagged[ch] = bool(head["flags"][i] & FLAG_GAP_MASK)
            if self._keep:
                self._table.append((offset, len(frame), seq, window, ch, int(head["basis"][i]),
                                    int(head["terms"][i]), int(head["step_code"][i]), valid))
        if valid < self.n and self.end_sample is None:
            # A short frame is the last window of its stream: the end is now known.
            self.end_sample = window * self.n + valid
            self.tracker.end_window = window + 1

    def _release(self, upto: int) -> list[Block]:
        lo = self.tracker.released
        if upto <= lo:
            return []
        if self.end_sample is not None:
            upto = min(upto, -(-self.end_sample // self.n))
        blocks = []
        # A long run of windows with no frame is released in pieces (bounded size each).
        for a in range(lo, upto, 256):
            b = min(upto, a + 256)
            vals = np.full((b - a, self.n, self.channels), np.nan)
            stat = np.full((b - a, self.n, self.channels), LOST, dtype=np.uint8)
            for win in [k for k in self._windows if a <= k < b]:
                w = self._windows.pop(win)
                w.settle()
                vals[win - a] = w.values.T
                stat[win - a] = w.status.T
            vals = vals.reshape(-1, self.channels)
            stat = stat.reshape(-1, self.channels)
            start = a * self.n
            if self.end_sample is not None:
                keep = max(0, min(vals.shape[0], self.end_sample - start))
                vals, stat = vals[:keep], stat[:keep]
            for code, name in STATUS_NAMES.items():
                self._sample_counts[name] += int(np.count_nonzero(stat == code))
            self._emitted = start + vals.shape[0]
            blocks.append(Block(start, vals, stat))
        self.tracker.release(upto)
        for win in [k for k in self._windows if k < upto]:  # beyond a now-known end
            del self._windows[win]
        return blocks

    # -- accounting -------------------------------------------------------------------------
    def _count(self, key: str) -> None:
        self._frame_counts[key] = self._frame_counts.get(key, 0) + 1

    def _event(self, kind: str, offset: int, **info) -> None:
        self._count(f"frames_{kind}")
        if len(self.events) < MAX_EVENTS:
            self.events.append({"event": kind, "offset": int(offset),
                                **{k: v for k, v in info.items() if v not in (None, "")}})

    def counts(self) -> dict:
        """Frame and sample counts so far (samples only for released windows)."""
        c = {"frames_ok": 0, "gap_frames_ok": 0, **self._frame_counts}
        c["frames_crc_failed"] = len(self.scanner.crc_failures)
        c["bytes_in"] = self.scanner.bytes_in
        c["bytes_skipped"] = self.scanner.skipped_bytes
        c["samples"] = self._emitted
        c.update({f"samples_{k}": v for k, v in self._sample_counts.items()})
        c["end_known"] = self.end_known
        c["events_listed"] = len(self.events)
        return c

    def frame_table(self) -> dict:
        """Accepted data frames as arrays (only with ``keep_frames``)."""
        cols = ("offset", "length", "sequence", "window", "channel", "basis", "terms",
                "step_code", "valid")
        arr = np.array(self._table, dtype=np.int64).reshape(-1, len(cols))
        table = {k: arr[:, i] for i, k in enumerate(cols)}
        table["bits"] = table["length"] * 8
        return table


def _join(blocks: list[Block]) -> list[Block]:
    """Merge consecutive blocks into one (they are contiguous by construction)."""
    if len(blocks) <= 1:
        return blocks
    return [Block(blocks[0].start, np.concatenate([b.samples for b in blocks]),
                  np.concatenate([b.status for b in blocks]))]


class StreamEncoder:
    """Incremental encoder: :meth:`feed` sample blocks, get frame bytes as windows complete.

    Holds fewer than N samples per channel between calls.  ``gaps`` is the gap
    policy (``codec._gaps``); with ``fill`` the interpolation sees only the
    samples of the windows being coded, so a gap at a block edge is held flat.
    """

    def __init__(self, profile: Profile, channels: int, gaps: str = "refuse"):
        if gaps not in GAP_POLICIES:
            raise ValueError(f"unknown gap policy {gaps!r}")
        self.profile = _bind(profile, channels)
        self.n = profile.frame_length
        self.gaps = gaps
        self._pending = np.zeros((0, channels))
        self.window = 0
        self.samples = 0
        self.bytes_out = 0

    def feed(self, block) -> bytes:
        """Samples in (rows x channels); bytes of the frames completed out."""
        block = np.asarray(block, dtype=np.float64)
        if block.ndim == 1:
            block = block[:, None]
        if block.shape[1] != self._pending.shape[1]:
            from ._errors import InputError

            raise InputError(f"a block has {block.shape[1]} channels, the stream "
                             f"{self._pending.shape[1]}")
        self._pending = np.concatenate([self._pending, block])
        whole = (self._pending.shape[0] // self.n) * self.n
        if whole == 0:
            return b""
        out = self._code(self._pending[:whole])
        self._pending = self._pending[whole:]
        return out

    def close(self) -> bytes:
        """End of stream: code the short last window, if any."""
        if self._pending.shape[0] == 0:
            return b""
        out = self._code(self._pending)
        self._pending = self._pending[:0]
        return out

    def _code(self, x: np.ndarray) -> bytes:
        res = encode(x, self.profile, gaps=self.gaps, first_window=self.window)
        self.window += -(-x.shape[0] // self.n)
        self.samples += x.shape[0]
        self.bytes_out += len(res.data)
        return res.data
