"""Speed of the link simulator: bits/s through the channels, codewords/s through RS(255,223).

Prints figures only (no pass/fail): uncoded BSC and AWGN BPSK on 20 M bits
(target >= 20 M bits/s, channel plus error count), RS(255,223) codewords and
coefwire frames per second (encode + decode) on a clean and a noisy channel,
and the K=7 Viterbi decoder's information bits per second.  The frame size is
measured: the input is encoded under the profile and its frames are counted.

Usage: python tools/bench_link.py [--bits N] [--input FILE] [-p PROFILE]
(default: the shipped orbiter housekeeping demo under the built-in default profile)
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np

import codec
from codec import locate_frames, read_samples
from link_sim import Convolutional, ReedSolomon255, awgn, bsc


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
    ap.add_argument("--input", default=str(Path(codec.__file__).parent / "data" / "orbiter_hk.csv"),
                    help="sample file whose frames set the frame size (default: demo data)")
    ap.add_argument("-p", "--profile", help="profile TOML (default: the built-in profile)")
    args = ap.parse_args()
    table = read_samples(args.input)
    profile = (codec.load_profile(args.profile) if args.profile
               else codec.default_profile()).bind(table.names)
    enc = codec.encode(table.values, profile)
    sizes = locate_frames(enc.data).lengths
    frame_bytes = float(sizes.mean())  # measured, not assumed
    print(f"frames of {Path(args.input).name} under {args.profile or 'the default profile'} "
          f"(layout {profile.layout_version}, N = {profile.frame_length}): {sizes.size} "
          f"frames, mean {frame_bytes:.1f} bytes (min {sizes.min()}, max {sizes.max()})")
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
    rate = data.size * 8 / air.size
    s_enc = _best(lambda: rs.encode(data), 2)
    for label, rx in (("clean", air), ("Eb/N0 6 dB", awgn(air, 6.0, rng, rate=rate)),
                      ("Eb/N0 5 dB", awgn(air, 5.0, rng, rate=rate))):
        s = _best(lambda rx=rx: rs.decode(rx, data.size), 1)
        _, st = rs.decode(rx, data.size)
        total = s + s_enc
        print(f"RS(255,223) {label:>11}: {400 / total:8.0f} codewords/s, "
              f"{data.size / frame_bytes / total:8.0f} frames/s of {frame_bytes:.0f} bytes "
              f"(encode {s_enc:.3f} s, decode {s:.3f} s, {st.codewords_failed} of 400 failed)")

    conv = Convolutional()
    cdata = rng.integers(0, 256, 256 * 64, dtype=np.uint8)
    soft = awgn(conv.encode(cdata), 3.0, rng, rate=0.5, soft=True)
    s = _best(lambda: conv.decode(soft, cdata.size), 1)
    print(f"Viterbi K=7 soft: {cdata.size * 8 / s / 1e6:7.2f} M info bits/s")


if __name__ == "__main__":
    main()
