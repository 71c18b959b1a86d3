"""Frame search on adversarial input: 2 MB full of sync markers (speed goal, not a test).

    python tools/bench_hostile.py [--mbytes 2] [--chunk 4096]

The input is built to make a frame search slow: every few bytes a sync marker
followed by a header of a known layout version that claims the longest frame
the profile allows (short and long length forms, layouts 1 to 4 and the
gap-mask kind), with the profile's own id byte, so every candidate reaches the
CRC check; a few real frames are spliced in so the search must also find them.
A search that checks each candidate's CRC over the bytes it claims costs
(candidates x claimed length): about 10^10 byte operations here.

Prints the seconds for the frame search alone, for the whole decoder
(``codec.decode``), for the streaming decoder fed in chunks, and for the
``inspect`` command, with the frames found and the bytes per second.  Goal:
each under 5 s for 2 MB on the shared 2-core machine.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

import codec
from codec import locate_frames, max_frame_bytes
from codec.cli import main as cli


def adversarial(profile: codec.Profile, size: int, real: bytes, seed: int = 1) -> bytes:
    """``size`` bytes of sync markers and greedy headers, with ``real`` spliced in 8 times."""
    pid = codec.profile_id(profile)
    longest = max_frame_bytes(profile)
    heads = [
        bytes([0xE3, 0x5A, 0x37, 0xFF, pid & 0xFF]),  # v3, 11-bit length 2047
        bytes([0xE3, 0x5A, 0x47, 0xFF, pid & 0xFF]),  # v4
        bytes([0xE3, 0x5A, 0x27, 0xFF, pid & 0xFF]),  # v2
        # v3 long form: 27-bit length = the longest frame the profile allows
        bytes([0xE3, 0x5A, 0x38 | (longest >> 24) & 7, (longest >> 16) & 0xFF,
               (longest >> 8) & 0xFF, longest & 0xFF, pid & 0xFF]),
        bytes([0xE3, 0x5A, 0x10, 0xFF, 0xFF]) + pid.to_bytes(2, "big"),  # v1, 65535
        bytes([0xE3, 0x5A, 0xF0, 0xFF, 0xFF]) + pid.to_bytes(2, "big"),  # gap kind
    ]
    rng = np.random.default_rng(seed)
    pieces, total = [], 0
    while total < size:
        h = heads[int(rng.integers(0, len(heads)))]
        pad = rng.integers(0, 256, size=int(rng.integers(0, 4)), dtype=np.uint8).tobytes()
        pieces.append(h + pad)
        total += len(h) + len(pad)
    data = bytearray(b"".join(pieces)[:size])
    for k in range(8):  # real frames the search must still find
        at = (k + 1) * size // 9
        data[at:at] = real
    return bytes(data)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--mbytes", type=float, default=2.0, help="adversarial input size (MB)")
    ap.add_argument("--chunk", type=int, default=4096, help="streaming decoder chunk size")
    args = ap.parse_args()
    profile = codec.Profile(frame_length=64).bind(["a", "b"])
    x = np.cumsum(np.random.default_rng(0).normal(size=(512, 2)), axis=0)
    real = codec.encode(x, profile).data
    data = adversarial(profile, int(args.mbytes * 1e6), real)
    key = codec.frame_key(profile)
    markers = data.count(b"\xe3\x5a")
    print(f"input {len(data)} bytes, {markers} sync markers, profile N = 64, 2 channels, "
          f"longest frame allowed {max_frame_bytes(profile)} bytes")

    t = time.perf_counter()
    loc = locate_frames(data, key, max_frame_bytes(profile))
    dt = time.perf_counter() - t
    print(f"frame search        {dt:7.2f} s  {len(data) / dt / 1e6:6.2f} MB/s  "
          f"{loc.offsets.size} frames, {len(loc.crc_failures)} CRC failures listed")

    t = time.perf_counter()
    dec = codec.decode(data, profile, strict=False)
    dt = time.perf_counter() - t
    print(f"decode              {dt:7.2f} s  {len(data) / dt / 1e6:6.2f} MB/s  "
          f"{dec.counts['frames_ok']} frames ok, {dec.counts['samples']} samples out")

    t = time.perf_counter()
    sd = codec.StreamDecoder(profile)
    for i in range(0, len(data), args.chunk):
        sd.feed(data[i : i + args.chunk])
    sd.close()
    dt = time.perf_counter() - t
    print(f"streaming decode    {dt:7.2f} s  {len(data) / dt / 1e6:6.2f} MB/s  "
          f"({args.chunk}-byte chunks, {sd.counts()['frames_ok']} frames ok)")

    with tempfile.TemporaryDirectory() as tmp:
        stream = Path(tmp) / "hostile.cwire"
        stream.write_bytes(data)
        codec.save_profile(profile, Path(f"{stream}.profile.toml"))
        out = io.StringIO()
        t = time.perf_counter()
        with contextlib.redirect_stdout(out):
            rc = cli(["inspect", str(stream)])
        dt = time.perf_counter() - t
    lines = out.getvalue().count("\n")
    print(f"inspect             {dt:7.2f} s  {len(data) / dt / 1e6:6.2f} MB/s  "
          f"(exit {rc}, {lines} lines listed)")


if __name__ == "__main__":
    sys.exit(main())
