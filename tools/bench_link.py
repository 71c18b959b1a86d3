"""Speed of the link simulator: bits/s through the channels, codewords/s through RS(255,223).

Prints figures only (no pass/fail): uncoded BSC and AWGN BPSK on 20 M bits
(target >= 20 M bits/s, channel plus error count), RS(255,223) codewords and
coefwire frames per second (encode + decode) on a clean and a noisy channel,
and the K=7 Viterbi decoder's information bits per second.

Usage: python tools/bench_link.py [--bits N]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from link_sim import awgn, bsc
from link_sim._fec import Convolutional, ReedSolomon255


def _best(fn, repeat=3) -> float:
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--bits", type=int, default=20_000_000)
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    bits = rng.integers(0, 2, args.bits, dtype=np.uint8)

    def run_bsc():
        return np.count_nonzero(bsc(bits, 1e-3, rng) != bits)

    def run_awgn():
        return np.count_nonzero(awgn(bits, 6.0, rng, "bpsk") != bits)

    for name, fn in (("BSC", run_bsc), ("AWGN BPSK hard", run_awgn)):
        s = _best(fn)
        print(f"{name:>16}: {args.bits / s / 1e6:7.1f} M bits/s ({args.bits} bits in {s:.3f} s)")

    rs = ReedSolomon255(1)
    data = rng.integers(0, 256, 223 * 400, dtype=np.uint8)  # 400 codewords
    air = rs.encode(data)
    frame_bytes = 88  # mean coefwire frame of the BasicMotions default profile
    rate = data.size * 8 / air.size
    s_enc = _best(lambda: rs.encode(data), 2)
    for label, rx in (("clean", air), ("Eb/N0 6 dB", awgn(air, 6.0, rng, rate=rate)),
                      ("Eb/N0 5 dB", awgn(air, 5.0, rng, rate=rate))):
        s = _best(lambda rx=rx: rs.decode(rx, data.size), 1)
        _, st = rs.decode(rx, data.size)
        total = s + s_enc
        print(f"RS(255,223) {label:>11}: {400 / total:8.0f} codewords/s, "
              f"{data.size / frame_bytes / total:8.0f} frames/s of {frame_bytes} bytes "
              f"(encode {s_enc:.3f} s, decode {s:.3f} s, {st.codewords_failed} of 400 failed)")

    conv = Convolutional()
    cdata = rng.integers(0, 256, 256 * 64, dtype=np.uint8)
    soft = awgn(conv.encode(cdata), 3.0, rng, rate=0.5, soft=True)
    s = _best(lambda: conv.decode(soft, cdata.size), 1)
    print(f"Viterbi K=7 soft: {cdata.size * 8 / s / 1e6:7.2f} M info bits/s")


if __name__ == "__main__":
    main()
