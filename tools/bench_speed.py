"""Encode and decode throughput of the default profile (a benchmark, not a test).

10**6 samples x 4 channels of a seeded mix of slow drift, tones and sensor
noise, coded with the built-in default profile (DCT, N = 64, F = 0.99, ac,
layout 7 with multi-channel frames).
Prints samples per second (samples x channels per second of wall time), the
best of a few repeats, and the same per second of this process's CPU time
(user + system), which other work on a shared machine disturbs less.  Targets
on a 2-core machine: encode >= 1 M samples/s, decode >= 2 M samples/s.

    python tools/bench_speed.py [--samples 1000000] [--channels 4] [--repeats 3] [--layout 4]
                                [--frames multi|single]

``--layout 4`` measures the same profile with layout 4 (dependent
quantization tried on every frame), which the targets do not cover.
``--frames`` sets what a frame carries (default: the layout's choice,
multi-channel from layout 7 on): the range decoder steps its lanes once per
coefficient of the longest, so before layout 7 (one string per frame)
multi-channel frames decode more slowly; layout 7 codes a string per channel.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

import codec


def _signal(samples: int, channels: int, seed: int = 7) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(samples)[:, None]
    drift = np.cumsum(rng.normal(0, 0.05, (samples, channels)), axis=0)
    tones = 2.0 * np.sin(2 * np.pi * t / rng.uniform(50, 5000, channels))
    return 100.0 + drift + tones + 0.02 * rng.normal(size=(samples, channels))


def _multi(profile) -> bool:
    """Whether the profile's frames carry every channel (also for trees before layout 7, whose
    profiles have no ``multi_frames``: the script is run on older trees to compare)."""
    return bool(getattr(profile, "multi_frames", profile.multi_channel_frames))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=1_000_000)
    ap.add_argument("--channels", type=int, default=4)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--layout", type=int, choices=(1, 2, 3, 4, 5, 6, 7), default=None,
                    help="frame layout (default: the default profile's)")
    ap.add_argument("--frames", choices=("multi", "single"),
                    help="what a frame carries (default: the layout's choice)")
    args = ap.parse_args()
    x = _signal(args.samples, args.channels)
    profile = codec.default_profile()
    if args.layout is not None:
        profile = profile.model_copy(update={"layout_version": args.layout})
    if args.frames is not None:
        profile = profile.model_copy(update={"multi_channel_frames": args.frames == "multi"})
    count = x.size
    enc_t, dec_t, enc_c, dec_c = [], [], [], []
    for _ in range(args.repeats):
        c0, t0 = time.process_time(), time.perf_counter()
        enc = codec.encode(x, profile)
        c1, t1 = time.process_time(), time.perf_counter()
        dec = codec.decode(enc.data, enc.profile, samples=args.samples)
        c2, t2 = time.process_time(), time.perf_counter()
        enc_t.append(t1 - t0)
        dec_t.append(t2 - t1)
        enc_c.append(c1 - c0)
        dec_c.append(c2 - c1)
    assert dec.delivered.all()
    print(f"input: {args.samples} samples x {args.channels} channels, default profile "
          f"(dct, N={profile.frame_length}, F={profile.fidelity}, {profile.reference}, "
          f"layout {profile.layout_version}"
          f"{', multi-channel frames' if _multi(profile) else ', single-channel frames'})")
    print(f"stream: {enc.report['bits_per_sample']:.3f} bits/sample, "
          f"{enc.report['frames']} frames, fidelity min {enc.report['fidelity_min']:.5f}")
    print(f"encode: {count / min(enc_t) / 1e6:.2f} M samples/s (best of {args.repeats})")
    print(f"decode: {count / min(dec_t) / 1e6:.2f} M samples/s (best of {args.repeats})")
    print(f"encode CPU: {count / min(enc_c) / 1e6:.2f} M samples per CPU second, "
          f"decode CPU: {count / min(dec_c) / 1e6:.2f}")


if __name__ == "__main__":
    main()
