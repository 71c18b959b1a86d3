"""Decoding a byte stream that arrives in chunks, stuffed or not, with its report.

:class:`ChunkDecoder` is what the ``decode`` command runs over a file or
standard input: the streaming decoder (:class:`codec.stream.live.StreamDecoder`)
behind an optional SLIP/COBS unstuffer (:mod:`codec.stream.stuffing`), a
per-channel count of sample statuses, and the stream's first bytes kept to
name a stuffing nobody asked to undo.  Memory stays bounded whatever the
stream's length: one packet, the decoder's own bounds, :data:`SNIFF_BYTES`.
"""

from __future__ import annotations

from .._errors import InputError
from .._profile import Profile
from ..encoder import frame_key
from ..report import DecoderCounts, StatusTally, decode_report
from .live import Block, StreamDecoder
from .stuffing import SNIFF_BYTES, Unstuffer, detect_stuffing

__all__ = ["ChunkDecoder"]


class ChunkDecoder:
    """Feed byte chunks, get released sample blocks; :meth:`report` at the end.

    Parameters
    ----------
    profile : Profile
        The stream's bound profile.
    samples : int, optional
        Samples in the stream (its note), when known.
    reorder, max_fill
        As for :class:`codec.stream.live.StreamDecoder`.
    stuffing : str
        ``none``, ``slip`` or ``cobs``: the byte stuffing to undo first.
    """

    def __init__(self, profile: Profile, samples: int | None = None, reorder: int = 16,
                 max_fill: int | None = None, stuffing: str = "none"):
        self.profile = profile
        self.stuffing = stuffing
        self.decoder = StreamDecoder(profile, samples=samples, reorder=reorder,
                                     max_fill=max_fill)
        self.unstuffer = Unstuffer(stuffing) if stuffing != "none" else None
        self.tally = StatusTally(len(profile.channels))
        self.bytes_read = 0
        self._head = bytearray()  # the stream's first bytes, to name an unasked stuffing

    def feed(self, chunk: bytes) -> list[Block]:
        """Bytes in (any chunk size); the blocks of samples they complete out."""
        self.bytes_read += len(chunk)
        if len(self._head) < SNIFF_BYTES:
            self._head += chunk[: SNIFF_BYTES - len(self._head)]
        if self.unstuffer is None:
            return self._take(self.decoder.feed(chunk))
        return self._take([b for packet in self.unstuffer.feed(chunk)
                           for b in self.decoder.feed(packet)])

    def close(self) -> list[Block]:
        """End of stream: the last packet, then every remaining window."""
        out = []
        if self.unstuffer is not None:
            out = [b for packet in self.unstuffer.close() for b in self.decoder.feed(packet)]
        return self._take(out + self.decoder.close())

    def _take(self, blocks: list[Block]) -> list[Block]:
        self.tally.add(blocks)
        return blocks

    def counts(self) -> DecoderCounts:
        """The decoder's frame and sample counts so far."""
        return self.decoder.counts()

    def report(self) -> dict:
        """The JSON report of the stream (:func:`codec.report.decode_report`)."""
        u = self.unstuffer
        return decode_report(self.counts(), self.profile, self.tally, self.decoder.events,
                             stuffing=None if u is None else self.stuffing,
                             packets_bad=0 if u is None else u.bad_packets,
                             packets_overlong=0 if u is None else u.overlong)

    def check_stuffing(self, where: str = "the stream") -> None:
        """Raise :class:`InputError` when a stuffed stream was read as plain frames.

        Asked only when samples were lost or no frame was read: then the
        stream's first bytes are unstuffed by each kind, and a kind that finds
        more frames is named, with the option that reads it.
        """
        c = self.counts()
        if self.unstuffer is not None or not (c.samples_lost or not c.frames_ok):
            return
        kind = detect_stuffing(bytes(self._head), frame_key(self.profile))
        if kind is not None:
            raise InputError(f"the stream is {kind.upper()}-stuffed but was read as plain "
                             f"frames; decode with --stuffing {kind}", where)
