"""CRC-valid frames to rows of samples: each frame's layout parses it, one synthesis for all.

The layout of each frame is the registered :class:`codec.layouts.registry.Layout`
of its version nibble; the gap-mask frame kind is handled here, its inner
data frame decoded like any other.  Whole-stream decoding
(:mod:`codec.stream.decode`) and the live decoder (:mod:`codec.stream.live`)
both build on :func:`decode_frames`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._profile import Profile, profile_id
from ..encoder import reconstruct
from ..layouts.envelope import GAP_KIND, SYNC
from ..layouts.gapmask import read_gap_runs, unwrap_gap_frame
from ..layouts.registry import ParseContext, Verdicts, layouts
from ..transform.bases import Basis
from ..transform.predict import add_predictions

__all__ = ["FrameRows", "decode_frames"]


@dataclass(frozen=True)
class FrameRows:
    """CRC-valid frames interpreted under a profile (the decode half's per-frame step).

    Per frame, in arrival order: ``kind`` (0 data, 1 gap mask), ``verdict``
    (``"ok"`` or a short key saying why the frame is refused; ``detail`` says
    it in words), ``crc``, ``sequence`` and its ``modulus`` (the layout's
    sequence range), ``valid`` and a few header fields in ``head`` for the
    frame table.  Per row (one window of one channel; a multi-channel frame
    has several): ``row_frame``, ``row_channel``, ``row_flags`` and the decoded
    ``rows`` (NaN for refused frames).  ``masks`` holds the ``(channel, mask,
    window offset)`` of every row with gaps of each accepted gap-mask frame, by
    frame index; the rows of its inner data frame belong to the same index.
    """

    kind: np.ndarray
    verdict: list
    detail: list
    crc: np.ndarray
    sequence: np.ndarray
    modulus: np.ndarray
    valid: np.ndarray
    head: dict
    row_frame: np.ndarray
    row_channel: np.ndarray
    row_flags: np.ndarray
    rows: np.ndarray
    masks: dict
    row_offset: np.ndarray = None  # window of each row minus its frame's window (v3: 0..15)
    row_valid: np.ndarray = None  # real samples of each row's window


_HEAD_KEYS = ("basis", "terms", "step_code")


@dataclass
class _Frames:
    """Per-frame arrays being filled while each layout parses its frames."""

    verdicts: Verdicts
    sequence: np.ndarray
    modulus: np.ndarray
    valid: np.ndarray
    head: dict
    parts: list


def decode_frames(frames: list[bytes], profile: Profile, basis: Basis) -> FrameRows:
    """Interpret CRC-valid frames; a foreign or impossible frame becomes a verdict, never an error.

    Every length and count read from the wire is checked against the profile
    before use, by the layout that parses the frame (each layout's ``parse``);
    gap-mask frames by :func:`_gap_rows`.
    """
    n = profile.frame_length
    nf = len(frames)
    lengths = np.fromiter((len(f) for f in frames), dtype=np.int64, count=nf)
    offsets = np.cumsum(lengths) - lengths
    joined = b"".join(frames)
    buf = np.frombuffer(joined, dtype=np.uint8)
    version = (buf[offsets + len(SYNC)] >> 4).astype(np.int64)
    crc = (buf[offsets + lengths - 2].astype(np.int64) << 8) | buf[offsets + lengths - 1]
    kind = np.where(version == GAP_KIND, 1, 0)
    # A gap-mask frame's rows and masks are keyed by its own 16-bit sequence number.
    acc = _Frames(Verdicts(nf), np.zeros(nf, np.int64), np.full(nf, 65536), np.zeros(nf, np.int64),
                  {k: np.zeros(nf, dtype=np.int64) for k in _HEAD_KEYS}, [])
    ctx = ParseContext(n, len(profile.channels), profile.reference == "ac", profile_id(profile),
                       basis.code, basis.name)
    known = kind == 1
    for layout in layouts():
        idx = np.flatnonzero(version == layout.version)
        known[idx] = True
        if idx.size:
            _layout_rows(layout, joined, offsets[idx], lengths[idx], idx, ctx, basis, acc)
    acc.verdicts.refuse(~known, "bad_header", "no registered layout has this version")
    masks = _gap_rows(frames, kind, profile, basis, acc)
    if acc.parts:
        rf, rc, rfl, rr, ro, rv = (np.concatenate(c) for c in zip(*acc.parts))
        order = np.argsort(rf, kind="stable")  # rows in frame order
        rf, rc, rfl, rr, ro, rv = rf[order], rc[order], rfl[order], rr[order], ro[order], \
            rv[order]
    else:
        rf = rc = rfl = ro = rv = np.zeros(0, np.int64)
        rr = np.zeros((0, n))
    v = acc.verdicts
    return FrameRows(kind, v.verdict, v.detail, crc, acc.sequence, acc.modulus, acc.valid,
                     acc.head, rf, rc, rfl, rr, masks, ro, rv)


def _layout_rows(layout, data: bytes, offsets: np.ndarray, lengths: np.ndarray, idx: np.ndarray,
                 ctx: ParseContext, basis: Basis, acc: _Frames) -> None:
    """Parse the frames ``idx`` of one layout, keep their verdicts and synthesize their rows."""
    p = layout.parse(data, offsets, lengths, ctx)
    v = acc.verdicts
    for i in [i for i, s in enumerate(p.verdict) if s != "ok"]:  # refused frames, usually none
        f = idx[i]
        v.ok[f], v.verdict[f], v.detail[f] = False, p.verdict[i], p.detail[i]
    acc.sequence[idx], acc.valid[idx] = p.sequence, p.valid
    acc.modulus[idx] = 1 << layout.sequence_bits
    acc.head["basis"][idx] = basis.code
    acc.head["terms"][idx] = p.terms
    acc.head["step_code"][idx] = p.step_code
    good = v.ok[idx][p.row_frame]
    rows = np.full((p.q.shape[0], ctx.n), np.nan)
    if good.any():
        sub = reconstruct(p.q[good], None if p.row_mean is None else p.row_mean[good],
                          p.row_step[good], basis, p.row_trellis[good],
                          None if p.row_alternate is None else p.row_alternate[good])
        if p.row_lag is not None:  # layouts 5 to 7: add each predicted window's prediction
            add_predictions(sub, p.row_lag[good], p.row_frame[good], p.row_channel[good],
                            p.row_offset[good])
        rows[good] = sub
    acc.parts.append((idx[p.row_frame], p.row_channel, np.zeros(p.row_frame.size, np.int64),
                      rows, p.row_offset, p.row_valid))


def _gap_rows(frames: list[bytes], kind: np.ndarray, profile: Profile, basis: Basis,
              acc: _Frames) -> dict[int, list]:
    """Gap-mask frames: their masks by frame index, and the rows of their inner data frames.

    Each gap-mask frame is split (:func:`codec.layouts.gapmask.unwrap_gap_frame`),
    the inner frames are decoded in one batch with their own checks, then the
    runs are read against the inner frame's samples
    (:func:`codec.layouts.gapmask.read_gap_runs`).
    """
    ok, verdict, detail = acc.verdicts.ok, acc.verdicts.verdict, acc.verdicts.detail
    masks: dict[int, list] = {}
    wrapped: list[tuple[int, int]] = []  # (gap-mask frame, bit where its runs start)
    inners: list[bytes] = []
    for f in np.flatnonzero(kind == 1).tolist():  # split each, then decode them at once
        got = unwrap_gap_frame(frames[f])
        if isinstance(got, str):
            ok[f], verdict[f], detail[f] = False, "bad_header", got
            continue
        wrapped.append((f, got[1]))
        inners.append(got[0])
    if not inners:
        return masks
    sub = decode_frames(inners, profile, basis)
    bounds = np.searchsorted(sub.row_frame, np.arange(len(inners) + 1)).tolist()
    for j, (f, at) in enumerate(wrapped):
        if sub.verdict[j] != "ok":
            ok[f], verdict[f] = False, sub.verdict[j]
            detail[f] = f"gap frame: {sub.detail[j] or sub.verdict[j]}"
            continue
        r = slice(bounds[j], bounds[j + 1])
        gap = read_gap_runs(frames[f], at, int(sub.row_valid[r].sum()))
        if isinstance(gap, str):
            ok[f], verdict[f], detail[f] = False, "bad_header", gap
            continue
        acc.sequence[f], acc.valid[f], acc.modulus[f] = (sub.sequence[j], sub.valid[j],
                                                         sub.modulus[j])
        # the runs index the inner frame's rows in order, each its valid samples
        cuts = np.cumsum(sub.row_valid[r])[:-1]
        masks[f] = [(int(ch), m, int(off)) for ch, m, off in
                    zip(sub.row_channel[r], np.split(gap, cuts), sub.row_offset[r]) if m.any()]
        acc.parts.append((np.full(r.stop - r.start, f), sub.row_channel[r], sub.row_flags[r],
                          sub.rows[r], sub.row_offset[r], sub.row_valid[r]))
        for k in _HEAD_KEYS:
            acc.head[k][f] = sub.head[k][j]
    return masks
