"""Whole-stream decoding: the live decoder fed the whole stream at once.

:func:`decode` is built on :class:`codec.stream.live.StreamDecoder`, which is
built on :func:`codec.stream.frames.decode_frames`; the encoder
(:mod:`codec.encoder`) imports none of them, so no import cycle remains.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .._errors import FrameError
from .._profile import Profile
from .._status import DELIVERED
from .live import StreamDecoder

__all__ = ["DecodeResult", "decode", "check_some_frame"]


@dataclass
class DecodeResult:
    """Decoded samples and an account of every frame.

    ``samples`` holds NaN where no frame delivered data; ``delivered`` is the
    matching boolean mask and ``status`` the per-sample account (delivered,
    lost, gap).

    Attributes
    ----------
    samples : ndarray, shape (samples, channels)
        Decoded samples, NaN where lost.
    delivered : ndarray of bool
        Where a frame delivered data.
    frames : dict
        Per accepted frame: its header fields and place in the output.
    crc_failures : list of int
        Offsets of frame candidates whose CRC failed.
    skipped_bytes : int
        Bytes that belong to no accepted frame.
    status : ndarray of uint8
        Status code per sample and channel (:data:`codec.STATUS_NAMES`).
    events : list of dict
        What happened to frames that did not make it.
    counts : dict
        Frame and sample counts.
    end_known : bool
        Whether the stream's end is certain.

    Examples
    --------
    A stream cut short loses the samples of its missing frame, and says so:

    >>> import numpy as np, codec
    >>> x = np.cumsum(np.random.default_rng(0).standard_normal((2048, 1)), axis=0)
    >>> enc = codec.encode(x, codec.default_profile())
    >>> first = codec.locate_frames(enc.data, codec.frame_key(enc.profile)).lengths[0]
    >>> dec = codec.decode(enc.data[:first], enc.profile, samples=2048)
    >>> dec.counts["samples_delivered"], dec.counts["samples_lost"]
    (1024, 1024)
    >>> bool(np.isnan(dec.samples[1024:]).all()), dec.end_known
    (True, True)
    """

    samples: np.ndarray
    delivered: np.ndarray
    frames: dict
    crc_failures: list[int] = field(default_factory=list)
    skipped_bytes: int = 0
    #: Per sample and channel: LOST 0, DELIVERED 1, GAP 2 (codes in ``codec.stream.search``).
    status: np.ndarray | None = None
    #: What happened to frames that did not make it (capped list of dicts).
    events: list = field(default_factory=list)
    #: Frame and sample counts; samples_delivered + samples_lost + samples_gap = samples.
    counts: dict = field(default_factory=dict)
    #: Whether the stream's end is certain (stream note, or a short last frame received).
    end_known: bool = False


def decode(data: bytes, profile: Profile, samples: int | None = None,
           reorder: int = 16, strict: bool = True, max_fill: int | None = None
           ) -> DecodeResult:
    """Decode a whole stream made under ``profile``.

    The same machine as the streaming decoder (:class:`codec.stream.live.StreamDecoder`)
    fed the whole stream at once, so both give identical results.  Frames whose
    CRC fails never reach the output; foreign, damaged, duplicated or late
    frames become events in the result, not errors.  Each frame is read by
    the registered layout of its version number, so a stream may mix layouts.

    Parameters
    ----------
    data : bytes
        The stream: frames back to back, with any bytes between them.
    profile : Profile
        The profile the stream was made under, bound (one channel spec per column).
    samples : int, optional
        The stream note's sample count: fixes the output length.  Without it
        the stream runs to the last frame received, and ``end_known`` says
        whether that end is certain.
    reorder : int
        Windows a frame may arrive behind the newest one and still be placed.
    strict : bool
        Raise :class:`FrameError` when not one frame was accepted; False gives
        an all-lost result and its counts instead.
    max_fill : int, optional
        With the end unknown, most lost windows a sequence jump may add
        (default ``codec.stream.live.MAX_FILL_WINDOWS``); the rest is a
        ``discontinuity`` event.

    Returns
    -------
    DecodeResult
        Samples (NaN where nothing was delivered), the delivered mask, the
        per-sample status, the frame table, events and counts.

    Raises
    ------
    ProfileError
        The profile lists no channels.
    FrameError
        With ``strict``, when no frame was accepted, saying why (no frame at
        all, or frames of another profile).

    Examples
    --------
    >>> import numpy as np, codec
    >>> x = np.cos(np.arange(200) / 7.0)[:, None]
    >>> enc = codec.encode(x, codec.Profile(frame_length=32))
    >>> dec = codec.decode(enc.data, enc.profile, samples=200)
    >>> dec.samples.shape, bool(dec.delivered.all())
    ((200, 1), True)
    >>> dec.counts["frames_crc_failed"]
    0
    """
    dec = StreamDecoder(profile, samples=samples, reorder=reorder, keep_frames=True,
                        max_fill=max_fill)
    blocks = dec.feed(data) + dec.close()
    if strict:
        check_some_frame(dec.counts(), dec.events)
    channels = len(profile.channels)
    values = np.concatenate([b.samples for b in blocks]) if blocks else np.zeros((0, channels))
    status = (np.concatenate([b.status for b in blocks]) if blocks
              else np.zeros((0, channels), np.uint8))
    return DecodeResult(values, status == DELIVERED, dec.frame_table(), dec.scanner.crc_failures,
                        dec.scanner.skipped_bytes, status, dec.events, dec.counts(),
                        dec.end_known)


def check_some_frame(counts: dict, events: list) -> None:
    """Raise :class:`FrameError` saying why, when a stream delivered no frame at all."""
    if counts.get("frames_ok", 0) or counts.get("gap_frames_ok", 0):
        return
    foreign = [e for e in events if e["event"] == "foreign_profile"]
    if foreign:
        raise FrameError(
            f"{counts.get('frames_foreign_profile', 0)} frames passed their CRC but were "
            f"{foreign[0].get('detail', 'made under another profile')}; decode with the profile "
            "the stream was encoded with", f"frame at byte {foreign[0]['offset']}")
    refused = [e for e in events if e["event"] == "bad_header"]
    if refused:
        raise FrameError(f"every CRC-valid frame was refused ({refused[0].get('detail')}); the "
                         "stream does not match this profile", f"frame at byte "
                         f"{refused[0]['offset']}")
    raise FrameError("no frame with a valid sync marker and CRC was found (frames made under "
                     "another profile fail their CRC too); give a coefwire stream and the "
                     "profile it was encoded with")
