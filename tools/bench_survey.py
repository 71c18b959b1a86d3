"""Survey speed on 1 and 2 Dask workers, and peak memory per worker.

Writes a generated archive (seeded, invented signals: --files files of
--rows rows x 6 channels, one of them --big times longer) to a temporary
folder and surveys it twice through ``run_survey``: on a local Dask cluster
of 1 worker process and on one of 2, both started before the clock runs (so
the figures are the survey, not the cluster's start-up).  Prints the wall
time of each, the speed-up, and each worker's peak resident memory (the
operating system's high-water mark, ``ru_maxrss``) before and after the
survey, beside the in-memory size of the largest file and of the whole
archive: a worker holds one file at a time, so its growth should follow the
largest file, not the archive.

    OMP_NUM_THREADS=1 python tools/bench_survey.py [--files 40] [--rows 1440]
"""

from __future__ import annotations

import argparse
import logging
import os
import resource
import tempfile
import time
from pathlib import Path

import numpy as np

from link_sim import (
    DEFAULT_FIDELITIES,
    SurveySettings,
    expand_archive,
    resolve_survey_bases,
    run_survey,
)

CHANNELS = ["temp_k", "humidity_pct", "pressure_hpa", "wind_m_s", "solar_w_m2", "battery_v"]
STEP_S = 60.0


def _write_archive(folder: Path, files: int, rows: int, big: int, seed: int) -> list[int]:
    rng = np.random.default_rng(seed)
    sizes = []
    for k in range(files):
        n = rows * (big if k == 0 else 1)
        t = np.arange(n) * STEP_S
        day = 2 * np.pi * t / 86400
        cols = [
            276 + 5 * np.sin(day) + np.cumsum(rng.normal(0, 0.01, n)),
            np.clip(75 - 10 * np.sin(day) + rng.normal(0, 0.3, n), 0, 100),
            1010 + np.cumsum(rng.normal(0, 0.02, n)),
            np.abs(3 + rng.normal(0, 1.5, n)),
            np.clip(800 * np.sin(day), 0, None) + rng.normal(0, 2, n),
            12.5 + 0.5 * np.sin(day) + rng.normal(0, 0.004, n),
        ]
        res = [0.01, 0.1, 0.1, 0.1, 1.0, 0.001]
        values = np.column_stack([np.round(c / r) * r for c, r in zip(cols, res)])
        with open(folder / f"st{k:03d}_day.csv", "w", encoding="utf-8") as fh:
            fh.write(",".join(["time", *CHANNELS]) + "\n")
            np.savetxt(fh, np.column_stack([t, values]), delimiter=",", fmt="%.6g")
        sizes.append(values.nbytes)
    return sizes


def _maxrss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux


def _warm() -> float:
    from link_sim import expand_archive  # noqa: F401  (load what a task imports before measuring)

    return _maxrss_mb()


def _timed(n_workers: int, items, settings, root: Path) -> tuple[float, list, list]:
    from distributed import Client, LocalCluster

    with LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                      scheduler_port=0, dashboard_address=":0",
                      silence_logs=logging.ERROR) as cluster, Client(cluster) as client:
        before = sorted(client.run(_warm).values())
        t0 = time.perf_counter()
        run_survey(items, root / f"out{n_workers}", settings,
                   scheduler=cluster.scheduler_address, quiet=True)
        wall = time.perf_counter() - t0
        after = sorted(client.run(_maxrss_mb).values())
    return wall, before, after


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--files", type=int, default=40)
    ap.add_argument("--rows", type=int, default=1440, help="rows per file (one day at 1/min)")
    ap.add_argument("--big", type=int, default=4, help="the first file is this many times longer")
    ap.add_argument("--bases", default="dct,haar,db4")
    ap.add_argument("--seed", type=int, default=20261202)
    args = ap.parse_args()
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    with tempfile.TemporaryDirectory(prefix="coefwire-bench-survey-") as tmp:
        root = Path(tmp)
        (root / "archive").mkdir()
        sizes = _write_archive(root / "archive", args.files, args.rows, args.big, args.seed)
        profile = {"frame_length": 64, "channels": [
            {"name": n, "sample_rate_hz": 1.0 / STEP_S} for n in CHANNELS]}
        from codec import Profile

        prof = Profile.model_validate(profile)
        settings = SurveySettings(prof.model_dump(mode="json"),
                                  resolve_survey_bases(args.bases, prof.frame_length),
                                  tuple(float(f) for f in DEFAULT_FIDELITIES.split(",")),
                                  "{station}_{date}.csv")
        items = expand_archive([str(root / "archive")], settings.group_by)
        print(f"archive: {len(items)} files, {sum(sizes) / 2**20:.1f} MiB of samples in memory "
              f"in all, largest file {max(sizes) / 2**20:.2f} MiB ({args.big} x {args.rows} "
              f"rows x {len(CHANNELS)} channels); bases {', '.join(settings.bases)}; "
              f"fidelities {DEFAULT_FIDELITIES}; cpus {os.cpu_count()}")
        results = {}
        for n in (1, 2):
            wall, before, after = _timed(n, items, settings, root)
            results[n] = wall
            print(f"{n} worker{'s' if n > 1 else ' '}: {wall:7.1f} s wall; peak RSS per worker "
                  f"before {', '.join(f'{b:.0f}' for b in before)} MiB, after "
                  f"{', '.join(f'{a:.0f}' for a in after)} MiB")
        print(f"speed-up 2 workers vs 1: {results[1] / results[2]:.2f}x (target >= 1.6x on "
              "2 free cores; the figure is noisy where others share the machine)")


if __name__ == "__main__":
    main()
