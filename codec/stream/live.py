"""Live streams: an incremental encoder and an incremental decoder with bounded memory.

:class:`StreamEncoder` takes sample blocks of any size and returns the bytes of
every frame as soon as its time window is complete; it holds fewer than N
samples per channel between calls (frame scope: fewer than one frame's windows,
which share a budget).  Frame coding is per frame, so the bytes
equal those of :func:`codec.encode` on the whole input (with the ``fill`` gap
policy interpolation only sees the samples of the current block; see below).

:class:`StreamDecoder` takes bytes in chunks of any size and returns decoded
sample blocks with a status per sample (``codec.stream.search`` codes), plus events
for everything that did not make it.  It holds one frame's bytes
(:class:`codec.stream.search.FrameScanner`), the windows within the reorder depth,
and a capped event list, whatever the input length.  Windows are released in
order once no frame can still land in them (the duplicate / out-of-order
policy of :class:`codec.stream.search.SequenceTracker`); the decision is made frame
by frame, so any chunking of the input gives the same output.

End of stream: with the stream note's sample count the end is known and every
lost frame is counted, even at the end.  Without it, a short last frame (valid
< N) also fixes the end; otherwise the output ends with the last window
received and ``end_known`` is False: frames lost after it cannot be counted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._errors import ProfileError
from .._profile import Profile
from .._status import DELIVERED, GAP, LOST, STATUS_NAMES
from ..encoder import _bind, encode, frame_key
from ..layouts.gapmask import GAP_POLICIES
from ..layouts.registry import layout_for
from ..report import DecoderCounts, FrameEvent
from .frames import decode_frames
from .search import FrameScanner, SequenceTracker

__all__ = ["Block", "StreamDecoder", "StreamEncoder", "MAX_EVENTS", "MAX_FILL_WINDOWS",
           "max_frame_bytes"]

#: Events kept in detail; later ones are only counted.
MAX_EVENTS = 1000
#: With the end unknown, lost windows one sequence jump may add at most (the rest is a
#: discontinuity).  256 covers every jump of layouts 2 to 4 (their 8-bit sequence
#: numbers cannot tell a jump over 127 windows), so only version 1, gap-mask frames
#: and a first frame far from window 0 meet it: 16 384 samples per channel at N = 64.
MAX_FILL_WINDOWS = 256
#: Place runs of plain in-order frames with whole-array work (False: every row through
#: SequenceTracker.place, the reference; the tests compare both).
FAST_PLACE = True
_FIRST_SPAN = 64  # frames in a first fast attempt (doubled while runs hold)


@dataclass(frozen=True)
class Block:
    """Decoded samples ``[start, start + len)`` of the stream, with their status codes."""

    start: int
    samples: np.ndarray
    status: np.ndarray


def _run_ends(plain: np.ndarray, modulus: np.ndarray) -> np.ndarray:
    """For each frame, the end of the run of plain frames of one modulus that holds it."""
    n = plain.size
    brk = np.ones(n + 1, dtype=bool)  # a run starts at i when brk[i]
    brk[1:n] = (~plain[1:]) | (~plain[:-1]) | (modulus[1:] != modulus[:-1])
    starts = np.flatnonzero(brk)
    ends = starts[np.searchsorted(starts, np.arange(n), side="right")]
    return ends


def max_frame_bytes(profile: Profile) -> int:
    """A bound on the bytes of any frame under ``profile``.

    The bound of the profile's layout
    (:meth:`codec.layouts.registry.Layout.max_frame_bytes`: generous, 16 bytes
    per coefficient of every channel and window a frame may carry, plus
    headers).  A candidate claiming more is not a frame of this profile, so a
    receiver never buffers more than this.

    Parameters
    ----------
    profile : Profile
        The stream's profile, bound (one channel spec per column).

    Returns
    -------
    int
        Bytes.

    Examples
    --------
    Even white noise kept whole (fidelity 1, the costliest input) stays far below it:

    >>> import numpy as np, codec
    >>> p = codec.default_profile().model_copy(update={"fidelity": 1.0}).bind(["a", "b"])
    >>> x = np.random.default_rng(0).standard_normal((2048, 2))
    >>> enc = codec.encode(x, p)
    >>> loc = codec.locate_frames(enc.data, codec.frame_key(enc.profile))
    >>> max_frame_bytes(p), bool(loc.lengths.max() < max_frame_bytes(p))
    (33344, True)
    """
    return layout_for(profile.layout_version).max_frame_bytes(profile)


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
    max_fill : int or None
        With the end unknown, most lost windows a sequence jump may add to the
        output (default :data:`MAX_FILL_WINDOWS`); windows beyond are cut out
        and reported as one ``discontinuity`` event.  None: no limit.  A
        decoder setting, not part of the profile.

    Examples
    --------
    Bytes fed in chunks of any size give the samples :func:`codec.decode` gives
    for the whole stream, with the status of each (1: delivered):

    >>> import numpy as np, codec
    >>> x = np.cumsum(np.random.default_rng(3).standard_normal((3000, 2)), axis=0)
    >>> p = codec.default_profile().bind(["a", "b"])
    >>> data = codec.encode(x, p).data
    >>> dec = StreamDecoder(p, samples=3000)
    >>> blocks = [b for i in range(0, len(data), 500) for b in dec.feed(data[i : i + 500])]
    >>> blocks += dec.close()
    >>> y = np.concatenate([b.samples for b in blocks])
    >>> bool(np.array_equal(y, codec.decode(data, p, samples=3000).samples))
    True
    >>> np.unique(np.concatenate([b.status for b in blocks])).tolist() == [codec.DELIVERED]
    True
    """

    def __init__(self, profile: Profile, samples: int | None = None, reorder: int = 16,
                 keep_frames: bool = False, max_fill: int | None = None):
        if not profile.channels:
            raise ProfileError("the profile lists no channels; decode with the stream's own "
                               "profile")
        if reorder < 0:
            raise ValueError("reorder must be >= 0")
        from ..transform.klt import profile_basis

        self.profile = profile
        self.n = profile.frame_length
        self.channels = len(profile.channels)
        self.basis = profile_basis(profile)  # loads and hash-checks a trained basis
        self.key = frame_key(profile, self.basis)
        self.scanner = FrameScanner(max_frame_bytes(profile), key=self.key)
        self.end_sample = int(samples) if samples is not None else None
        end_window = None if samples is None else -(-int(samples) // self.n)
        if max_fill is None:
            max_fill = MAX_FILL_WINDOWS
        elif max_fill < 0:
            raise ValueError("max_fill must be >= 0")
        self.tracker = SequenceTracker(reorder=reorder, end_window=end_window,
                                       max_fill=max_fill)
        # Accepted data frames not yet released: window, channel, valid, flags, rows.
        self._pending: list[tuple[np.ndarray, ...]] = []
        self._masks: dict[tuple[int, int], np.ndarray] = {}  # (window, channel) -> gap mask
        self._next = 0  # first window not yet emitted
        self.events: list[FrameEvent] = []
        self._frame_counts: dict[str, int] = {}
        self._sample_counts = dict.fromkeys(STATUS_NAMES.values(), 0)
        self._emitted = 0
        self._keep = keep_frames
        self._table: list[np.ndarray] = []
        self._closed = False
        self._jumps = 0  # discontinuities (jumps cut short with the end unknown)
        self._cut = 0  # windows they left out

    @property
    def end_known(self) -> bool:
        return self.end_sample is not None

    def complete(self) -> bool:
        """Whether every (window, channel) up to the stream's known end has arrived.

        A live receiver stops here instead of waiting for a timeout; always
        False while the end is unknown.
        """
        if self.end_sample is None:
            return False
        end = -(-self.end_sample // self.n)
        have = {(int(w), int(c)) for p in self._pending for w, c in zip(p[0], p[1])}
        have |= set(self._masks)
        return all((w, c) in have for w in range(self._next, end) for c in range(self.channels))

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
        if found:
            self._place_all(found)
        tr = self.tracker
        if final:
            if self.end_sample is not None:
                tr.released = max(tr.released, -(-self.end_sample // self.n))
            elif tr.head is not None:
                tr.released = max(tr.released, tr.head + 1)
        out = self._emit(tr.released)
        tr.release(tr.released)
        return out

    def _place_all(self, found: list[tuple[int, bytes]]) -> None:
        """Verdict and window of every frame row, in arrival order.

        Runs of plain in-order frames are placed with whole-array work
        (:meth:`_place_run`); every other frame goes row by row through
        :meth:`SequenceTracker.place`, the reference the fast path must equal.
        """
        fr = decode_frames([f for _, f in found], self.profile, self.basis)
        tr = self.tracker
        seqs, mods = fr.sequence.tolist(), fr.modulus.tolist()
        kinds, crcs = fr.kind.tolist(), fr.crc.tolist()
        row_ch = fr.row_channel.tolist()
        row_off, row_valid = fr.row_offset.tolist(), fr.row_valid.tolist()  # v3: several windows
        first_row = np.searchsorted(fr.row_frame, np.arange(len(found) + 1)).tolist()
        take: list[int] = []
        wins: list[int] = []
        # Frames the fast path may take: accepted data frames with rows and no gap masks.
        plain = np.array([v == "ok" and kinds[i] == 0 and i not in fr.masks
                          and first_row[i + 1] > first_row[i]
                          for i, v in enumerate(fr.verdict)], dtype=bool)
        run_end = _run_ends(plain, fr.modulus) if FAST_PLACE else None
        i = 0
        # Attempt sizes grow while runs hold; after a failed attempt the next waits a
        # few frames (doubling), so a stream that is all reordering stays row by row.
        span, wait, retry = _FIRST_SPAN, 1, 0
        while i < len(found):
            if run_end is not None and plain[i] and tr.head is not None and i >= retry:
                stop = min(int(run_end[i]), i + span)
                done = self._place_run(fr, i, stop, first_row, take, wins)
                if done == stop:
                    span, wait = span * 2, 1
                elif done > i:
                    span, wait = max(_FIRST_SPAN, 2 * (done - i)), 1
                else:
                    span, retry, wait = _FIRST_SPAN, i + wait, min(2 * wait, _FIRST_SPAN)
                if done > i:
                    i = done
                    continue
            offset = found[i][0]
            i += 1
            if fr.verdict[i - 1] != "ok":
                self._event(fr.verdict[i - 1], offset, detail=fr.detail[i - 1])
                continue
            f = i - 1
            placed = False
            items = [(row_ch[r], 0, r, row_off[r], row_valid[r])
                     for r in range(first_row[f], first_row[f + 1])]
            items += [(ch, 1, mask, off, mask.size) for ch, mask, off in fr.masks.get(f, ())]
            for ch, kind, what, off, rvalid in items:  # data rows, then a gap frame's masks
                window, where = tr.place((seqs[f] + off) % mods[f], ch, kind, crcs[f], mods[f])
                if tr.last_cut:
                    self._discontinuity(offset, window, tr.last_cut)
                if where != "ok":
                    self._event(where, offset, window=window, channel=ch)
                    continue
                placed = True
                if kind == 1:
                    self._masks[(window, ch)] = what
                else:
                    take.append(what)
                    wins.append(window)
                if rvalid < self.n and self.end_sample is None:
                    # A short window is the last of its stream: the end is now known.
                    self.end_sample = window * self.n + rvalid
                    tr.end_window = window + 1
            if placed:
                self._count("frames_ok" if kinds[f] == 0 else "gap_frames_ok")
            tr.released = tr.releasable(False)
        if take:
            self._keep_rows(fr, found, take, wins)

    def _keep_rows(self, fr, found: list[tuple[int, bytes]], take: list[int],
                   wins: list[int]) -> None:
        """Hold the placed rows ``take`` (their windows ``wins``) until their windows release."""
        idx = np.array(take, dtype=np.int64)
        win = np.array(wins, dtype=np.int64)
        fidx = fr.row_frame[idx]
        self._pending.append((win, fr.row_channel[idx], fr.row_valid[idx],
                              fr.row_flags[idx], fr.rows[idx]))
        if self._keep:
            offs = np.fromiter((o for o, _ in found), dtype=np.int64, count=len(found))
            lens = np.fromiter((len(f) for _, f in found), dtype=np.int64, count=len(found))
            self._table.append(np.stack([offs[fidx], lens[fidx], fr.sequence[fidx], win,
                                         fr.row_channel[idx], fr.head["basis"][fidx],
                                         fr.head["terms"][fidx], fr.head["step_code"][fidx],
                                         fr.row_valid[idx]], axis=1))

    def _place_run(self, fr, start: int, stop: int, first_row: list[int],
                   take: list[int], wins: list[int]) -> int:
        """Place frames ``[start, k)`` of a run of plain frames at once; return ``k``.

        ``k`` is the first frame with a row that :meth:`SequenceTracker.place`
        might not accept: a window before 0, past the end or already released,
        a jump the ``max_fill`` rule would cut, a repeated (window, channel), a
        short window that fixes the end, or a sequence number the unwrapping
        below might read otherwise.  The rows before it are exactly those
        ``place`` would accept, with the same windows.
        """
        tr = self.tracker
        r0, r1 = first_row[start], first_row[stop]
        rf = fr.row_frame[r0:r1]
        mod = int(fr.modulus[start])  # one modulus in a run (see _run_ends)
        half = mod // 2
        seq = (fr.sequence[rf] + fr.row_offset[r0:r1]) % mod
        # Unwrap each row against the one before (serial-number steps), the first against
        # the head as place does; then check each against the head place would hold there
        # (the largest window so far): within half the range of it, place reads the same.
        step = np.empty(r1 - r0, dtype=np.int64)
        step[0] = (int(seq[0]) - tr.head - tr.shift + half) % mod - half
        step[1:] = (seq[1:] - seq[:-1] + half) % mod - half
        win = tr.head + np.cumsum(step)
        top = np.maximum.accumulate(np.maximum(win, tr.head))  # head after each row
        before = np.concatenate([[tr.head], top[:-1]])  # head place holds at each row
        ch = fr.row_channel[r0:r1]
        bad = (win - before < -half) | (win - before >= half) | (win < 0)
        if tr.max_fill is not None and tr.end_window is None:
            bad |= win - before - 1 > tr.max_fill
        if tr.end_window is not None:
            bad |= win >= tr.end_window
        # Released before each row: as left by the previous frame (releasable(False)).
        rel = np.full(r1 - r0, tr.released, dtype=np.int64)
        later = rf > start
        if later.any():
            last = np.asarray(first_row[start + 1 : stop + 1], dtype=np.int64) - 1 - r0
            rel[later] = np.maximum(rel[later], top[last[rf[later] - start - 1]] - tr.reorder + 1)
        bad |= win < rel
        if self.end_sample is None:
            bad |= fr.row_valid[r0:r1] < self.n
        # A (window, channel) met before: earlier in the run, or in the tracker (whose
        # windows are at most its head).
        order = np.lexsort((np.arange(r1 - r0), ch, win))
        again = np.zeros(r1 - r0, dtype=bool)
        again[order[1:]] = (win[order[1:]] == win[order[:-1]]) & (ch[order[1:]] == ch[order[:-1]])
        bad |= again
        old = np.flatnonzero(win <= tr.head)
        seen = tr._seen
        for r, w, c in zip(old.tolist(), win[old].tolist(), ch[old].tolist()):
            if (w, c, 0) in seen:
                bad[r] = True
        nbad = np.flatnonzero(bad)
        k = stop if nbad.size == 0 else int(rf[nbad[0]])  # whole frames only
        if k == start:
            return start
        n = first_row[k] - r0
        win, ch = win[:n], ch[:n]
        tr.last_cut = 0
        tr.head = int(top[n - 1])
        tr.released = tr.releasable(False)
        # Keys of windows now released are never looked up again (a frame there is late).
        keep = win >= tr.released
        crc = fr.crc[rf[:n]]
        seen.update(zip(zip(win[keep].tolist(), ch[keep].tolist(), [0] * int(keep.sum())),
                        crc[keep].tolist()))
        take.extend(range(r0, r0 + n))
        wins.extend(win.tolist())
        self._frame_counts["frames_ok"] = self._frame_counts.get("frames_ok", 0) + (k - start)
        return k

    def _emit(self, upto: int) -> list[Block]:
        """Blocks for windows ``[next, upto)``, whole-array work over their frames."""
        if self.end_sample is not None:
            upto = min(upto, -(-self.end_sample // self.n))
        if upto <= self._next:
            return []
        if self._pending:
            win, ch, valid, flags, rows = (np.concatenate(c) for c in zip(*self._pending))
        else:
            win = ch = valid = flags = np.zeros(0, np.int64)
            rows = np.zeros((0, self.n))
        go = win < upto
        blocks = []
        n, nc = self.n, self.channels
        # A long run of windows with no frame is released in pieces (bounded size each).
        # Each piece's rows found by bisection in window order, then taken in arrival order
        # (what a mask over all rows would select, without one mask per piece).
        order = np.argsort(win, kind="stable")
        bounds = np.searchsorted(win[order], np.arange(self._next, upto + 256, 256)).tolist()
        for j, a in enumerate(range(self._next, upto, 256)):
            b = min(upto, a + 256)
            hi = bounds[j + 1] if b == a + 256 else int(np.searchsorted(win[order], b))
            sel = np.sort(order[bounds[j] : hi])
            vals = np.full((b - a, nc, n), np.nan)
            stat = np.full((b - a, nc, n), LOST, dtype=np.uint8)
            have = np.arange(n) < valid[sel][:, None]
            w, c = win[sel] - a, ch[sel]
            vals[w, c] = np.where(have, rows[sel], np.nan)
            stat[w, c] = np.where(have, DELIVERED, LOST)
            for key in [key for key in self._masks if a <= key[0] < b]:  # rare: one per gap frame
                mask = self._masks.pop(key)
                vals[key[0] - a, key[1], : mask.size][mask] = np.nan
                stat[key[0] - a, key[1], : mask.size][mask] = GAP
            vals = vals.transpose(0, 2, 1).reshape(-1, nc)
            stat = stat.transpose(0, 2, 1).reshape(-1, nc)
            start = a * n
            if self.end_sample is not None:
                keep = max(0, min(vals.shape[0], self.end_sample - start))
                vals, stat = vals[:keep], stat[:keep]
            counts = np.bincount(stat.ravel(), minlength=len(STATUS_NAMES))
            for code, name in STATUS_NAMES.items():
                self._sample_counts[name] += int(counts[code])
            self._emitted = start + vals.shape[0]
            blocks.append(Block(start, vals, stat))
        self._next = upto
        rest = ~go
        if self.end_sample is not None:  # frames past a now-known end are never released
            rest &= win < -(-self.end_sample // n)
        self._pending = [(win[rest], ch[rest], valid[rest], flags[rest], rows[rest])] \
            if rest.any() else []
        for key in [key for key in self._masks if key[0] < upto]:  # beyond a now-known end
            del self._masks[key]
        return _join(blocks)

    # -- accounting -------------------------------------------------------------------------
    def _count(self, key: str) -> None:
        self._frame_counts[key] = self._frame_counts.get(key, 0) + 1

    def _event(self, kind: str, offset: int, **info) -> None:
        self._count(f"frames_{kind}")
        if len(self.events) < MAX_EVENTS:
            self.events.append(FrameEvent(kind, int(offset), **info))

    def _discontinuity(self, offset: int, window: int, cut: int) -> None:
        """A jump with the end unknown: ``cut`` windows left out before ``window``."""
        self._jumps += 1
        self._cut += cut
        if len(self.events) < MAX_EVENTS:
            self.events.append(FrameEvent("discontinuity", int(offset), window=int(window),
                                          windows_cut=int(cut)))

    def counts(self) -> DecoderCounts:
        """Frame and sample counts so far (samples only for released windows)."""
        return DecoderCounts(
            **self._frame_counts, frames_crc_failed=self.scanner.crc_failure_count,
            bytes_in=self.scanner.bytes_in, bytes_skipped=self.scanner.skipped_bytes,
            samples=self._emitted, **{f"samples_{k}": v for k, v in self._sample_counts.items()},
            end_known=self.end_known, discontinuities=self._jumps, windows_cut=self._cut,
            events_listed=len(self.events))

    def frame_table(self) -> dict:
        """Accepted data frames as arrays (only with ``keep_frames``)."""
        cols = ("offset", "length", "sequence", "window", "channel", "basis", "terms",
                "step_code", "valid")
        arr = (np.concatenate(self._table) if self._table
               else np.zeros((0, len(cols)), np.int64))
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

    Holds fewer than N samples per channel between calls (in frame scope, fewer
    than N x windows_per_frame: a frame's windows share one budget).  ``gaps`` is the gap
    policy (``codec.layouts.gapmask``); with ``fill`` the interpolation sees only the
    samples of the windows being coded, so a gap at a block edge is held flat.

    Parameters
    ----------
    profile : Profile
        The stream's profile.
    channels : int
        Columns of every block.
    gaps : str
        Gap policy: ``refuse``, ``fill`` or ``mark``.

    Examples
    --------
    Blocks of any size give the same bytes as one :func:`codec.encode` call:

    >>> import numpy as np, codec
    >>> x = np.cumsum(np.random.default_rng(3).standard_normal((3000, 2)), axis=0)
    >>> p = codec.default_profile().bind(["a", "b"])
    >>> enc = StreamEncoder(p, 2)
    >>> data = b"".join(enc.feed(block) for block in np.array_split(x, 7)) + enc.close()
    >>> data == codec.encode(x, p).data, enc.samples
    (True, 3000)
    """

    def __init__(self, profile: Profile, channels: int, gaps: str = "refuse"):
        if gaps not in GAP_POLICIES:
            raise ValueError(f"unknown gap policy {gaps!r}")
        self.profile = _bind(profile, channels)
        self.n = profile.frame_length
        # Frame scope: the windows of one frame share a budget, so whole frames are
        # coded at once (what encode does with the whole input); else whole windows.
        layout = layout_for(profile.layout_version)
        self.unit = self.n * (layout.windows_per_frame(profile)
                              if profile.fidelity_scope == "frame" and layout.supports_frame_scope
                              else 1)
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
            from .._errors import InputError

            raise InputError(f"a block has {block.shape[1]} channels, the stream "
                             f"{self._pending.shape[1]}")
        self._pending = np.concatenate([self._pending, block])
        whole = (self._pending.shape[0] // self.unit) * self.unit
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
