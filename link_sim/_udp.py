"""Frames over UDP: a paced sender and a receiver that decodes datagrams as they arrive.

One frame per datagram.  UDP may lose, duplicate or reorder datagrams; the
streaming decoder (:class:`codec.StreamDecoder`) handles all three by sequence
number, so the receiver needs nothing of its own beyond the socket.  Both ends
are bounded: the sender by its stream, the receiver by a duration, an idle
timeout and (with the stream note's sample count) by the stream's known end.
"""

from __future__ import annotations

import socket
import time
from collections.abc import Callable
from dataclasses import dataclass

import codec
from codec import InputError
from codec._stream import locate_frames

__all__ = ["parse_endpoint", "split_frames_of", "send_frames", "receive_frames", "SendStats"]

_MAX_DATAGRAM = 65535


def parse_endpoint(text: str, any_port: bool = False) -> tuple[str, int]:
    """``HOST:PORT`` -> (host, port); a clear error for anything else.

    ``any_port``: a listener may give port 0 (the system picks a free port).
    """
    host, sep, port = text.rpartition(":")
    lowest = 0 if any_port else 1
    if not sep or not host or not port.isdigit() or not lowest <= int(port) < 65536:
        raise InputError(f"{text!r} is not HOST:PORT (e.g. 127.0.0.1:47000)", "--udp")
    return host.strip("[]"), int(port)


def split_frames_of(data: bytes) -> list[bytes]:
    """The CRC-valid frames of a stream, one bytes object each (what goes in a datagram)."""
    loc = locate_frames(data)
    return [data[o : o + n] for o, n in zip(loc.offsets.tolist(), loc.lengths.tolist())]


@dataclass
class SendStats:
    frames: int
    bytes: int
    seconds: float


def send_frames(frames: list[bytes], host: str, port: int, rate_bps: float | None = None,
                clock: Callable[[], float] = time.monotonic,
                sleep: Callable[[float], None] = time.sleep) -> SendStats:
    """Send each frame as one datagram, paced so frame bits never run ahead of ``rate_bps``.

    Frame ``k`` leaves no earlier than ``t0 + bits_before_k / rate_bps``: the
    pace of a link of that rate (UDP/IP headers are not counted; they are not
    on the radio link being modelled).
    """
    if rate_bps is not None and rate_bps <= 0:
        raise InputError("the rate must be positive bits per second", "--rate-bps")
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
    return SendStats(len(frames), sent_bits // 8, clock() - t0)


def receive_frames(decoder: codec.StreamDecoder, host: str, port: int, on_block,
                   duration_s: float | None = None, idle_s: float | None = None,
                   ready: Callable[[int], None] | None = None) -> dict:
    """Decode datagrams arriving at ``host:port`` until the stream is complete or time is up.

    ``on_block`` receives every released :class:`codec._streaming.Block`.  Stops
    when the decoder has every frame up to the stream's known end, after
    ``duration_s`` seconds, or after ``idle_s`` seconds without a datagram
    (once one has arrived).  ``ready(port)`` is called once the socket is bound
    (port 0 picks a free port).  Returns the decoder's counts plus
    ``datagrams`` and ``seconds``.
    """
    if duration_s is not None and duration_s <= 0:
        raise InputError("the duration must be positive seconds", "--duration")
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    start = time.monotonic()
    datagrams = 0
    last = None
    with socket.socket(family, socket.SOCK_DGRAM) as sock:
        try:
            sock.bind((host, port))
        except OSError as exc:
            raise InputError(f"cannot listen on {host}:{port} ({exc.strerror})", "--udp") \
                from None
        if ready is not None:
            ready(sock.getsockname()[1])
        while not decoder.complete():
            now = time.monotonic()
            left = [0.2]
            if duration_s is not None:
                left.append(start + duration_s - now)
            if idle_s is not None and last is not None:
                left.append(last + idle_s - now)
            timeout = min(left)
            if timeout <= 0:
                break
            sock.settimeout(timeout)
            try:
                data = sock.recv(_MAX_DATAGRAM)
            except TimeoutError:
                continue
            datagrams += 1
            last = time.monotonic()
            for block in decoder.feed(data):
                on_block(block)
    for block in decoder.close():
        on_block(block)
    counts = decoder.counts()
    counts["datagrams"] = datagrams
    counts["seconds"] = time.monotonic() - start
    return counts
