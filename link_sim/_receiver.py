"""What the ground station makes of the bytes that come out of the FEC decoder.

Frame search, CRC check and sequence-number placement are the codec's own
(:func:`codec.decode`); this module adds what a receiver on a noisy link needs
around it:

* a CRC-valid frame whose header does not fit the profile (possible through a
  noisy channel: CRC-16 lets about 2^-16 of corrupted frames through) is
  rejected and counted, instead of stopping the decode;
* every delivered frame is compared with what was sent (the simulator knows
  the truth) to count undetected errors;
* delivered frames whose values fall outside the channel's plausible range
  (``ChannelSpec.valid_min``/``valid_max``) are flagged;
* lost spans are filled by a concealment policy, and every output sample is
  marked delivered, concealed or lost.

Concealment policies (per channel, on the sample grid):

``hold``    repeat the last delivered value; a span before the first delivered
            sample stays lost.
``linear``  straight line between the delivered samples on either side; a span
            at either end holds the nearest delivered value.
``zero``    fill with 0.
``none``    leave NaN (lost).
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass

import numpy as np

import codec
from codec import CONCEALED, DELIVERED, LOST, locate_frames  # status vocabulary, frame search

__all__ = ["CONCEAL_POLICIES", "LOST", "DELIVERED", "CONCEALED", "Reception", "receive",
           "conceal"]

CONCEAL_POLICIES = ("hold", "linear", "zero", "none")


@dataclass(frozen=True)
class Reception:
    """Output samples, their status and an account of every frame received.

    ``status`` holds the codec's codes LOST, DELIVERED or CONCEALED (uint8,
    :data:`codec.STATUS_NAMES`) per sample and channel;
    ``out_of_range`` marks delivered samples of frames flagged implausible.

    Attributes
    ----------
    samples : ndarray, shape (samples, channels)
        Decoded and concealed samples (NaN where lost).
    status : ndarray of uint8
        Status code per sample and channel.
    out_of_range : ndarray of bool
        Delivered samples of frames flagged implausible.
    frames_delivered, frames_undetected_errors, frames_rejected_header : int
        Frames decoded; of those, frames whose bytes differ from the sent ones
        (a CRC collision); frames refused on their header.
    frames_out_of_range, crc_failures : int
        Frames flagged implausible; frame candidates whose CRC failed.

    Made by :func:`receive`.
    """

    samples: np.ndarray
    status: np.ndarray
    out_of_range: np.ndarray
    frames_delivered: int
    frames_undetected_errors: int
    frames_rejected_header: int
    frames_out_of_range: int
    crc_failures: int


@dataclass(frozen=True)
class _Decoded:
    """What the codec delivered from a received stream, one row per window and channel.

    ``offsets``/``lengths`` are each row's frame on the wire (a frame may
    carry several rows); ``refused`` counts CRC-valid frames the decoder
    refused (damaged header, foreign, misplaced).
    """

    samples: np.ndarray
    delivered: np.ndarray
    offsets: np.ndarray
    lengths: np.ndarray
    windows: np.ndarray
    channels: np.ndarray
    crc_failures: int
    refused: int

    @classmethod
    def nothing(cls, total: int, channels: int) -> _Decoded:
        """No frame of ours survived: every sample lost."""
        empty = np.zeros(0, np.int64)
        return cls(np.full((total, channels), np.nan), np.zeros((total, channels), bool),
                   empty, empty, empty, empty, 0, 0)


def _decode_tolerant(rx: bytes, profile, total: int) -> _Decoded:
    """codec.decode, falling back to one frame at a time when a frame's header is refused."""
    try:
        d = codec.decode(rx, profile, samples=total)
        # The decoder refuses damaged, foreign or misplaced frames as events, not errors.
        return _Decoded(d.samples, d.delivered, d.frames["offset"], d.frames["length"],
                        d.frames["window"], d.frames["channel"], len(d.crc_failures),
                        d.counts.frames_refused)
    except codec.FrameError:
        pass
    loc = locate_frames(rx, codec.frame_key(profile))
    out = np.full((total, len(profile.channels)), np.nan)
    got = np.zeros(out.shape, bool)
    keep, lens, windows, chans = [], [], [], []
    for off, length in zip(loc.offsets.tolist(), loc.lengths.tolist()):
        try:
            d = codec.decode(rx[off: off + length], profile, samples=total)
        except codec.FrameError:
            continue
        out = np.where(d.delivered, d.samples, out)
        got |= d.delivered
        rows = d.frames["window"].size  # a frame may carry several windows or channels
        keep.append(np.full(rows, off))
        lens.append(np.full(rows, length))
        windows.append(d.frames["window"])
        chans.append(d.frames["channel"])
    if not keep:
        empty = np.zeros(0, np.int64)
        return _Decoded(out, got, empty, empty, empty, empty, len(loc.crc_failures),
                        int(loc.offsets.size))
    offs = np.concatenate(keep).astype(np.int64)
    rejected = loc.offsets.size - np.unique(offs).size
    return _Decoded(out, got, offs, np.concatenate(lens).astype(np.int64),
                    np.concatenate(windows).astype(np.int64),
                    np.concatenate(chans).astype(np.int64), len(loc.crc_failures),
                    int(rejected))


def conceal(samples: np.ndarray, delivered: np.ndarray, policy: str):
    """Fill the undelivered samples by ``policy``; return (filled, status).

    Parameters
    ----------
    samples : ndarray, shape (samples, channels)
        Decoded samples (any value where not delivered).
    delivered : ndarray of bool, same shape
        Which samples arrived.
    policy : {"hold", "linear", "zero", "none"}
        How to fill the others (module docstring).

    Returns
    -------
    filled : ndarray
        The samples, filled (NaN where still lost).
    status : ndarray of uint8
        DELIVERED, CONCEALED or LOST per sample.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([[1.0], [0.0], [3.0], [0.0]])
    >>> got = np.array([[True], [False], [True], [False]])
    >>> filled, status = conceal(x, got, "linear")
    >>> filled.ravel().tolist(), [codec.STATUS_NAMES[s] for s in status.ravel()]
    ([1.0, 2.0, 3.0, 3.0], ['delivered', 'concealed', 'delivered', 'concealed'])
    >>> conceal(x, got, "none")[0].ravel().tolist()
    [1.0, nan, 3.0, nan]
    """
    if policy not in CONCEAL_POLICIES:
        raise ValueError(f"unknown concealment policy {policy!r}")
    out = np.where(delivered, samples, np.nan)
    status = np.where(delivered, DELIVERED, LOST).astype(np.uint8)
    gap = ~delivered
    if policy == "none" or not gap.any():
        return out, status
    if policy == "zero":
        out[gap] = 0.0
    elif policy == "hold":
        rows = np.arange(out.shape[0])[:, None]
        last = np.maximum.accumulate(np.where(delivered, rows, -1), axis=0)
        fill = gap & (last >= 0)
        out[fill] = out[last[fill], np.nonzero(fill)[1]]
    else:  # linear
        rows = np.arange(out.shape[0])
        for c in range(out.shape[1]):  # np.interp is 1-D; one call per channel
            d = delivered[:, c]
            if d.any():
                out[~d, c] = np.interp(rows[~d], rows[d], out[d, c])
    status[gap & np.isfinite(out)] = CONCEALED
    return out, status


def receive(rx: bytes, tx: bytes, arrived: np.ndarray, frame_lengths: np.ndarray,
            profile, total: int, policy: str = "hold") -> Reception:
    """Decode the received stream ``rx`` and account for every frame against ``tx``.

    Parameters
    ----------
    rx, tx : bytes
        The FEC decoder's output and the stream that was sent (same length).
    arrived : ndarray of bool
        Per sent frame, False where the frame was erased (never arrived).
    frame_lengths : ndarray
        Byte length of every sent frame, in stream order.
    profile : codec.Profile
        The bound profile the stream was encoded with.
    total : int
        Samples per channel that were sent.
    policy : str
        Concealment policy (see module docstring).

    Returns
    -------
    Reception
        Samples, status and the frame account.

    Examples
    --------
    Four frames of four 64-sample windows each; the second frame is erased:
    its 256 samples are concealed, the others delivered exactly as decoded:

    >>> import numpy as np
    >>> p = codec.default_profile().model_copy(update={"windows_per_frame": 4}).bind(["a"])
    >>> x = np.sin(np.arange(1024) / 40.0)[:, None]
    >>> enc = codec.encode(x, p)
    >>> lengths = codec.locate_frames(enc.data, codec.frame_key(enc.profile)).lengths
    >>> arrived = np.array([True, False, True, True])
    >>> r = receive(enc.data, enc.data, arrived, lengths, enc.profile, 1024)
    >>> r.frames_delivered, r.frames_undetected_errors, r.crc_failures
    (3, 0, 0)
    >>> int((r.status == codec.CONCEALED).sum()), int((r.status == codec.DELIVERED).sum())
    (256, 768)
    """
    byte_keep = np.repeat(arrived, frame_lengths)
    rxa = np.frombuffer(rx, np.uint8)[byte_keep]
    txa = np.frombuffer(tx, np.uint8)[byte_keep]
    kept_len = frame_lengths[arrived]
    kept_start = np.cumsum(kept_len) - kept_len
    channels = len(profile.channels)
    d = _Decoded.nothing(total, channels)
    if rxa.size:
        with contextlib.suppress(codec.FrameError):  # no frame of ours at all survived
            d = _decode_tolerant(rxa.tobytes(), profile, total)
    samples, got, offs, lens, windows, chans = (d.samples, d.delivered, d.offsets, d.lengths,
                                                d.windows, d.channels)
    crc_fail, rejected = d.crc_failures, d.refused
    # The decoder lists one row per window and channel; a frame on the wire may carry
    # several, so frames are counted by their offsets.
    row_offs = offs
    offs, row_frame = np.unique(row_offs, return_inverse=True)
    frame_lens = np.zeros(offs.size, np.int64)
    frame_lens[row_frame] = lens
    lens = frame_lens
    # Truth: a delivered frame is right when it sits where a sent frame started, has
    # that frame's length and every byte matches.
    diff = np.concatenate([[0], np.cumsum(rxa != txa)])
    slot = np.searchsorted(kept_start, offs)
    aligned = (slot < kept_start.size) & (kept_start[np.minimum(slot, kept_start.size - 1)]
                                          == offs)
    same_len = aligned & (kept_len[np.minimum(slot, max(kept_len.size - 1, 0))] == lens) \
        if kept_len.size else aligned
    clean = same_len & (diff[offs + lens] - diff[offs] == 0)
    # Plausible range per channel from the profile.
    lo = np.array([-np.inf if c.valid_min is None else c.valid_min for c in profile.channels])
    hi = np.array([np.inf if c.valid_max is None else c.valid_max for c in profile.channels])
    bad = got & ((samples < lo) | (samples > hi))
    n = profile.frame_length
    w_total = -(-total // n)
    bad_w = np.zeros((w_total * n, channels), bool)
    bad_w[:total] = bad
    bad_wc = bad_w.reshape(w_total, n, channels).any(axis=1)
    inside = windows < w_total
    flagged_rows = np.zeros(windows.size, bool)
    flagged_rows[inside] = bad_wc[windows[inside], chans[inside]]
    flagged = np.zeros(offs.size, bool)
    np.logical_or.at(flagged, row_frame, flagged_rows)
    out, status = conceal(samples, got, policy)
    return Reception(out, status, bad, int(offs.size), int((~clean).sum()), int(rejected),
                     int(flagged.sum()), int(crc_fail))
