"""Start-up time of the command line: wall time of short commands, several runs, median.

    python tools/bench_startup.py [--runs 5]

Measures, each in a fresh process as a user would run it:

* ``coefwire --help``                      (goal: <= 0.5 s)
* ``python -c "import codec"``
* ``coefwire encode`` of 1 000 samples x 4 channels, CSV with a time column
                                           (goal: <= 1.5 s)
* ``coefwire decode`` of that stream

The command is run as ``python -m codec.cli`` with this interpreter (the same
code the ``coefwire`` script runs), as a user runs it: bytecode caching on
(``PYTHONDONTWRITEBYTECODE`` is dropped from the environment; ``--no-cache``
keeps it, so every module is compiled at every start) and one warm-up run per
command that is not counted.  Goals are printed beside the figures; they are
not asserted anywhere (no timed tests).
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

GOALS_S = {"coefwire --help": 0.5, "encode 1000 x 4": 1.5}


def _sample(path: Path) -> None:
    """1 000 samples of three vibration axes (m/s^2) and a temperature (K), with a time column."""
    rng = np.random.default_rng(7)
    t = np.arange(1000) * 0.01
    axes = [np.sin(2 * np.pi * 5.0 * t + k) + 0.1 * rng.standard_normal(t.size) for k in range(3)]
    temp = 300.0 + np.cumsum(0.01 * rng.standard_normal(t.size))
    np.savetxt(path, np.column_stack([t, *axes, temp]), delimiter=",", fmt="%.6f",
               header="time,ax,ay,az,temp", comments="")


def _wall(cmd: list[str], runs: int, cwd: Path, cache: bool) -> list[float]:
    env = {**os.environ, "OMP_NUM_THREADS": "1"}
    if cache:
        env.pop("PYTHONDONTWRITEBYTECODE", None)
    out = []
    subprocess.run(cmd, cwd=cwd, env=env, check=True, stdout=subprocess.DEVNULL,
                   stderr=subprocess.DEVNULL)  # warm-up, not counted
    for _ in range(runs):
        t0 = time.perf_counter()
        subprocess.run(cmd, cwd=cwd, env=env, check=True, stdout=subprocess.DEVNULL,
                       stderr=subprocess.DEVNULL)
        out.append(time.perf_counter() - t0)
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=5, help="runs per command (default 5)")
    ap.add_argument("--no-cache", action="store_true",
                    help="keep PYTHONDONTWRITEBYTECODE as set (compile every module each start)")
    args = ap.parse_args()
    py = sys.executable
    cli = [py, "-m", "codec.cli"]
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        _sample(d / "in.csv")
        subprocess.run(cli + ["encode", "in.csv", "-o", "s.cwire"], cwd=d, check=True,
                       stdout=subprocess.DEVNULL)
        cases = {
            "python -c 'pass'": [py, "-c", "pass"],
            "import codec": [py, "-c", "import codec"],
            "coefwire --help": cli + ["--help"],
            "coefwire encode --help": cli + ["encode", "--help"],
            "encode 1000 x 4": cli + ["encode", "in.csv", "-o", "s.cwire"],
            "decode 1000 x 4": cli + ["decode", "s.cwire", "-o", "out.csv"],
        }
        cache = not args.no_cache
        print(f"{'command':<24} {'median s':>9} {'min s':>7} {'max s':>7}  goal  ({args.runs} runs,"
              f" {os.cpu_count()} CPUs, load {os.getloadavg()[0]:.2f}, bytecode cache "
              f"{'on' if cache else 'as set'})")
        for name, cmd in cases.items():
            w = _wall(cmd, args.runs, d, cache)
            med = statistics.median(w)
            goal = GOALS_S.get(name)
            verdict = "" if goal is None else f"<= {goal} s: {'met' if med <= goal else 'MISSED'}"
            print(f"{name:<24} {med:>9.3f} {min(w):>7.3f} {max(w):>7.3f}  {verdict}")


if __name__ == "__main__":
    main()
