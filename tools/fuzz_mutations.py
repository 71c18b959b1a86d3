"""10^4 mutated valid streams through the decoder (the full-size run of tests/test_hostile.py).

    python tools/fuzz_mutations.py [--streams 10000] [--seed 7] [--layout 3]

Mutations: bit flips, truncations, garbage insertions (half with a false sync
marker), duplicated spans, deleted spans; one to three per stream.  Prints how
many streams ran, how many raised anything (must be 0: strict=False reports
damage instead), how many broke accounting or delivered a sample from a frame
failing its CRC (must be 0), inputs per second and the tracemalloc peak.
"""

from __future__ import annotations

import argparse
import binascii
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from test_hostile import _mutate  # noqa: E402  (the same mutation operators as the tests)

import codec  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--streams", type=int, default=10_000)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--layout", type=int, choices=(1, 2, 3, 4), default=3,
                    help="frame layout of the stream that is mutated (default 3)")
    args = ap.parse_args()
    rng = np.random.default_rng(args.seed)
    x = np.cumsum(np.random.default_rng(1).normal(size=(400, 2)), axis=0)
    enc = codec.encode(x, codec.Profile(frame_length=32, layout_version=args.layout))
    clean = codec.decode(enc.data, enc.profile, samples=400)
    raised = broken = forged = 0
    inputs_bytes = 0
    tracemalloc.start()
    t0 = time.perf_counter()
    for _ in range(args.streams):
        data = _mutate(rng, enc.data)
        inputs_bytes += len(data)
        try:
            dec = codec.decode(data, enc.profile, samples=400, strict=False)
        except Exception as exc:  # noqa: BLE001 - counting every escape is the point
            raised += 1
            print("raised:", type(exc).__name__, exc)
            continue
        c = dec.counts
        if c["samples_delivered"] + c["samples_lost"] + c["samples_gap"] != dec.status.size:
            broken += 1
        for off, n in zip(dec.frames["offset"].tolist(), dec.frames["length"].tolist()):
            f = data[off : off + n]
            if binascii.crc_hqx(f[2:-2], 0xFFFF) != int.from_bytes(f[-2:], "big"):
                broken += 1
        d = dec.delivered
        if not np.array_equal(dec.samples[d], clean.samples[d]):
            forged += 1  # a corrupted frame that passed CRC-16 by chance (expected ~2^-16)
    dt = time.perf_counter() - t0
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    print(f"streams {args.streams}, {inputs_bytes} bytes, {args.streams / dt:.0f} streams/s")
    print(f"raised {raised}, accounting/CRC broken {broken}, "
          f"CRC-valid but altered frames {forged}")
    print(f"tracemalloc peak {peak / 1e6:.2f} MB")


if __name__ == "__main__":
    main()
