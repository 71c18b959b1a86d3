"""Frames over UDP: a paced sender and a receiver that decodes datagrams as they arrive.

One frame per datagram.  UDP may lose, duplicate or reorder datagrams; the
streaming decoder (:class:`codec.StreamDecoder`) handles all three by sequence
number, so the receiver needs nothing of its own beyond the socket.  Both ends
are bounded: the sender by its stream, the receiver by a duration, an idle
timeout and (with the stream note's sample count) by the stream's known end.
"""

from __future__ import annotations

import contextlib
import socket
import time
from collections.abc import Callable
from dataclasses import dataclass

import codec
from codec import InputError, locate_frames

__all__ = ["parse_endpoint", "split_frames_of", "send_frames", "receive_frames", "SendStats",
           "SEND_COUNTED", "UdpReception"]

_MAX_DATAGRAM = 65535


def parse_endpoint(text: str, allow_any_port: bool = False) -> tuple[str, int]:
    """``HOST:PORT`` -> (host, port); a clear error for anything else.

    ``allow_any_port``: port 0 is accepted (a listener then binds a free port).
    """
    host, sep, port = text.rpartition(":")
    low = 0 if allow_any_port else 1
    if not sep or not host or not port.isdigit() or not low <= int(port) < 65536:
        raise InputError(f"{text!r} is not HOST:PORT (e.g. 127.0.0.1:47000)", "--udp")
    return host.strip("[]"), int(port)


def split_frames_of(data: bytes) -> list[bytes]:
    """The CRC-valid frames of a stream, one bytes object each (what goes in a datagram)."""
    loc = locate_frames(data)
    return [data[o : o + n] for o, n in zip(loc.offsets.tolist(), loc.lengths.tolist())]


#: What the sender counts, in one sentence (printed and written to the JSON report).
SEND_COUNTED = ("bits counted: the coefwire frames as sent, sync marker to CRC (UDP, IP and "
                "link headers not counted: they are not on the radio link being modelled); "
                "time counted: from the start of the first frame to the end of the last frame "
                "at the link rate (the last frame's own time on the link included)")


@dataclass(frozen=True)
class SendStats:
    """What :func:`send_frames` sent: frames, bytes and the seconds the stream took.

    With a rate, ``seconds`` runs to the end of the last frame at that rate, so
    ``8 * bytes / seconds`` is the average rate on the modelled link.
    """

    frames: int
    bytes: int
    seconds: float
    rate_bps: float | None = None

    @property
    def average_bps(self) -> float:
        return 8 * self.bytes / self.seconds if self.seconds > 0 else float("inf")

    @property
    def rate_error_percent(self) -> float | None:
        """Average rate against the asked rate, in percent (None without a rate)."""
        if not self.rate_bps:
            return None
        return 100.0 * (self.average_bps - self.rate_bps) / self.rate_bps

    def report(self) -> dict:
        """The JSON report of ``coefwire send``: what was sent, how fast, and what is counted."""
        return {"frames": self.frames, "bits": 8 * self.bytes, "seconds": self.seconds,
                "rate_bps": self.rate_bps, "average_bps": self.average_bps,
                "rate_error_percent": self.rate_error_percent, "counted": SEND_COUNTED}


def send_frames(frames: list[bytes], host: str, port: int, rate_bps: float | None = None,
                clock: Callable[[], float] = time.monotonic,
                sleep: Callable[[float], None] = time.sleep) -> SendStats:
    """Send each frame as one datagram, paced so frame bits never run ahead of ``rate_bps``.

    Frame ``k`` leaves no earlier than ``t0 + bits_before_k / rate_bps``: the
    pace of a link of that rate (UDP/IP headers are not counted; they are not
    on the radio link being modelled).  Every departure time is reckoned from
    ``t0``, never from the previous one, so a late wake-up is made up at the
    next frame instead of adding up over the stream.  After the last frame the
    sender waits until ``t0 + all_bits / rate_bps``, the end of that frame on
    the link, so the stream's duration, and hence its average rate, is that of
    the link (see :data:`SEND_COUNTED`).
    """
    if rate_bps is not None and not (rate_bps > 0 and rate_bps != float("inf")):
        raise InputError("the rate must be a positive, finite number of bits per second",
                         "--rate-bps")
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    sent_bits = 0
    t0 = clock()
    with socket.socket(family, socket.SOCK_DGRAM) as sock:
        for frame in frames:
            if rate_bps:
                wait = t0 + sent_bits / rate_bps - clock()
                if wait > 0:
                    sleep(wait)
            sock.sendto(frame, (host, port))
            sent_bits += 8 * len(frame)
    if rate_bps:
        wait = t0 + sent_bits / rate_bps - clock()
        if wait > 0:
            sleep(wait)
    return SendStats(len(frames), sent_bits // 8, clock() - t0, rate_bps)


@dataclass(frozen=True)
class UdpReception:
    """What :func:`receive_frames` received: the decoder's counts and how listening went.

    ``counts`` is the decoder's :class:`codec.DecoderCounts` once closed;
    ``datagrams`` the datagrams read, ``seconds`` the time listened, and
    ``stopped`` why it stopped (``complete``, ``duration``, ``idle``, a stop
    reason such as a signal's name, ``interrupted`` or ``error``).
    """

    counts: codec.DecoderCounts
    datagrams: int
    seconds: float
    stopped: str | None


#: Datagrams read, at most, from those already waiting when the receiver stops.
_DRAIN_MAX = 65536
#: Receive buffer asked of the kernel, so a burst waits in the socket while a
#: datagram is decoded (the kernel may grant less: net.core.rmem_max).
_RCVBUF_BYTES = 1 << 22


def receive_frames(decoder: codec.StreamDecoder, host: str, port: int, on_block,
                   duration_s: float | None = None, idle_s: float | None = None,
                   ready: Callable[[int], None] | None = None,
                   stop: Callable[[], str | None] | None = None,
                   on_finish: Callable[[UdpReception], None] | None = None) -> UdpReception:
    """Decode datagrams arriving at ``host:port`` until the stream is complete or time is up.

    ``on_block`` receives every released :class:`codec.StreamDecoder` block.  Stops
    when the decoder has every frame up to the stream's known end, after
    ``duration_s`` seconds, after ``idle_s`` seconds spent waiting with no
    datagram (once one has arrived; time spent decoding does not count, so a
    burst waiting in the socket is read whatever the decoding costs), or when
    ``stop()`` returns a reason (e.g. the name of a signal received).
    Datagrams already waiting when it stops are still read, then the decoder
    is closed and every remaining block released, also when ``on_block`` or
    the decoder raise: ``on_finish(reception)`` then runs before the error
    propagates (a caller writes its report there).  ``ready(port)`` is called
    once the socket is bound (port 0 picks a free port).  Returns a
    :class:`UdpReception`: the decoder's counts plus ``datagrams``,
    ``seconds`` and ``stopped`` (why: complete, duration, idle, a stop
    reason, interrupted or error).
    """
    if duration_s is not None and duration_s <= 0:
        raise InputError("the duration must be positive seconds", "--duration")
    if idle_s is not None and idle_s <= 0:
        raise InputError("the idle time must be positive seconds", "--idle")
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    start = time.monotonic()
    datagrams = 0
    reason = None
    error: BaseException | None = None
    with socket.socket(family, socket.SOCK_DGRAM) as sock:
        try:
            sock.bind((host, port))
        except OSError as exc:
            raise InputError(f"cannot listen on {host}:{port} ({exc.strerror})", "--udp") \
                from None
        with contextlib.suppress(OSError):
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, _RCVBUF_BYTES)
        if ready is not None:
            ready(sock.getsockname()[1])

        def take(data: bytes) -> None:
            nonlocal datagrams
            datagrams += 1
            for block in decoder.feed(data):
                on_block(block)

        waiting_since = None  # when the receiver last began to wait for a datagram
        try:
            while reason is None:
                if decoder.complete():
                    reason = "complete"
                    break
                if stop is not None and (reason := stop()):
                    break
                now = time.monotonic()
                left = {"": 0.2}  # wake now and then to look at stop()
                if duration_s is not None:
                    left["duration"] = start + duration_s - now
                if idle_s is not None and waiting_since is not None:
                    left["idle"] = waiting_since + idle_s - now
                why = min(left, key=left.get)
                if left[why] <= 0:
                    reason = why
                    break
                sock.settimeout(left[why])
                try:
                    data = sock.recv(_MAX_DATAGRAM)
                except TimeoutError:
                    continue
                take(data)
                waiting_since = time.monotonic()  # decoding time is not idle time
            if reason != "complete":  # what already waits in the socket was received
                sock.setblocking(False)
                for _ in range(_DRAIN_MAX):
                    try:
                        data = sock.recv(_MAX_DATAGRAM)
                    except (BlockingIOError, InterruptedError):
                        break
                    take(data)
        except KeyboardInterrupt:  # no handler installed (not the main thread): a stop too
            reason = "interrupted"
        except BaseException as exc:  # finish with what we have, then let it propagate
            reason, error = "error", exc
    try:
        for block in decoder.close():
            on_block(block)
    except Exception:
        if error is None:
            raise
    reception = UdpReception(decoder.counts(), datagrams, time.monotonic() - start, reason)
    if on_finish is not None:
        on_finish(reception)
    if error is not None:
        raise error
    return reception
