"""Shared helpers for the stream tests: a small real stream and damage patterns."""

from __future__ import annotations

import contextlib
import hashlib
import io
import queue
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np
from crcref import crc16_ibm3740_ref
from realdata import motion

import codec
from codec.stream.search import locate_frames

__all__ = ["real_stream", "frames_of", "crc_ok_reference", "assert_accounting", "EXAMPLE_DIGEST",
           "keyed_crc", "with_crc", "digest_of", "receive_over_loopback"]

#: The profile digest of FRAME_LAYOUT.md's worked examples: bytes 00 01 02 ... 1f.
EXAMPLE_DIGEST = bytes(range(32))


def digest_of(profile) -> bytes:
    """The 32-byte profile digest the codec derives (its CRC prefix is rebuilt here)."""
    return codec.frame_key(profile).digest


def keyed_crc(frame_wo_crc: bytes, digest: bytes) -> int:
    """CRC of FRAME_LAYOUT.md "Profile check", rebuilt outside the codec:
    CRC-16/IBM-3740 by the implementation written from the catalogue parameters
    (tests/crcref.py; check value 0x29B1) over SHA-256(digest || frame length, 4 bytes
    big-endian) (hashlib) followed by the frame's bytes after the sync marker.
    ``frame_wo_crc`` ends before the CRC."""
    length = len(frame_wo_crc) + 2
    prefix = hashlib.sha256(digest + length.to_bytes(4, "big")).digest()
    return crc16_ibm3740_ref(prefix + frame_wo_crc[2:])


def with_crc(frame_wo_crc: bytes, digest: bytes) -> bytes:
    """The frame with its CRC appended (a hostile sender who knows the profile can)."""
    return frame_wo_crc + keyed_crc(frame_wo_crc, digest).to_bytes(2, "big")


def real_stream(samples: int = 600, channels: int = 3, n: int = 32, windows: int = 1,
                multi: bool = False, **enc):
    """Encode the first ``samples`` rows of real accelerometer counts (see realdata).

    One window of one channel per frame by default, so damage patterns hit single
    windows of single channels.
    """
    x = motion("train")[:samples, :channels]
    prof = codec.Profile(frame_length=n, windows_per_frame=windows, multi_channel_frames=multi)
    return x, codec.encode(x, prof, **enc)


def frames_of(data: bytes, profile=None) -> list[tuple[int, int]]:
    loc = locate_frames(data, None if profile is None else codec.frame_key(profile))
    return list(zip(loc.offsets.tolist(), loc.lengths.tolist()))


def crc_ok_reference(frame: bytes, digest: bytes) -> bool:
    """The frame's CRC rebuilt by :func:`keyed_crc` (the catalogue implementation of
    tests/crcref.py), independent of the codec's prefix-state arithmetic."""
    return keyed_crc(frame[:-2], digest) == int.from_bytes(frame[-2:], "big")


def assert_accounting(dec, channels: int) -> None:
    """delivered + lost + gap (+ concealed) = samples x channels, per count and per array."""
    c = dec.counts
    total = c["samples_delivered"] + c["samples_lost"] + c["samples_gap"] + c["samples_concealed"]
    assert total == c["samples"] * channels == dec.status.size
    assert np.count_nonzero(dec.status == codec.DELIVERED) == c["samples_delivered"]
    assert np.array_equal(np.isnan(dec.samples), dec.status != codec.DELIVERED)


def receive_over_loopback(stream: Path, output: Path, receive_args: tuple = (),
                          send_args: tuple = ()) -> str:
    """Send ``stream`` to a real ``receive`` over loopback UDP; return what receive printed.

    ``receive`` runs in its own process (it installs signal handlers) on
    127.0.0.1 port 0 and says which port it got; this waits for that line
    (readiness, not a fixed sleep), runs ``send`` in this process, and waits
    for ``receive`` to stop at the stream's known end with exit status 0.
    The returned text is everything receive printed after its "listening" line.
    """
    from codec.cli import main

    argv = [sys.executable, "-m", "codec.cli", "receive", "--udp", "127.0.0.1:0", "-p",
            f"{stream}.profile.toml", "-o", str(output), "--duration", "60", "--idle", "30",
            *receive_args]
    with subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                          text=True, encoding="utf-8") as proc:
        lines: queue.Queue = queue.Queue()
        reader = threading.Thread(target=lambda: [lines.put(ln) for ln in proc.stdout])
        reader.start()
        try:
            first = lines.get(timeout=120)  # generous: a loaded machine imports numpy slowly
            assert first.startswith("listening on 127.0.0.1:"), first
            port = int(first.rsplit(":", 1)[1])
            assert port > 0
            with contextlib.redirect_stdout(io.StringIO()):
                assert main(["send", str(stream), "--udp", f"127.0.0.1:{port}",
                             *send_args]) == 0
            assert proc.wait(timeout=120) == 0, "".join(lines.queue)
        finally:
            if proc.poll() is None:
                proc.kill()
            proc.wait()
            reader.join()
    return "".join(lines.queue)

