"""Write link_sim/data/fec_curves.json: measured BER against Eb/N0 for every FEC.

The link budget reads this file for the Eb/N0 a coded link needs.  Each curve
is a Monte-Carlo run of :func:`link_sim.measured_ber_curve` over AWGN with
coherent BPSK (Gray QPSK has the same BER per bit); the file records how it
was made (command, seed, bits simulated, date, coefwire version).

Each curve stops at the first grid point where no decoded bit was wrong in the
bits simulated.  For RS(255,223) the file also carries the bounded-distance
estimate (``ber_post_fec_theory``, see :func:`link_sim.ber_rs_bounded_distance`)
from the BPSK channel BER, and the Eb/N0 it needs for each target, which
reaches rates too low to simulate; the measured points check it.

``required_ebn0_db`` interpolates log10(BER) linearly between neighbouring grid
points that both saw at least ``MIN_ERRORS`` bit errors; it is null where the
curve does not reach the target with enough errors to trust (then
``below_floor_at_db`` gives the first grid point with no error at all in the
bits simulated, an upper bound on what is needed for BER < 1/bits).

Usage: python tools/make_fec_curves.py [--bits N] [--seed S] [--out PATH]
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys
import time
from importlib.metadata import version
from pathlib import Path

import numpy as np

from link_sim import (
    ber_bpsk,
    ber_rs_bounded_distance,
    ebn0_for_ber_bpsk,
    linear_to_db,
    measured_ber_curve,
)

TARGETS = (1e-3, 1e-4, 1e-5, 1e-6)
MIN_ERRORS = 10


def required(ebn0: np.ndarray, ber: np.ndarray, errors: np.ndarray, target: float):
    ok = errors >= MIN_ERRORS
    for i in range(ebn0.size - 1):
        if ok[i] and ok[i + 1] and ber[i] >= target >= ber[i + 1] and ber[i + 1] > 0:
            a, b = np.log10(ber[i]), np.log10(ber[i + 1])
            return float(ebn0[i] + (np.log10(target) - a) / (b - a) * (ebn0[i + 1] - ebn0[i]))
    return None


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--bits", type=int, default=4_000_000, help="information bits per point")
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--out", default=str(Path(__file__).resolve().parents[1]
                                         / "link_sim/data/fec_curves.json"))
    args = ap.parse_args(argv)
    grid = np.round(np.arange(0.0, 12.01, 0.25), 2)
    curves = {}
    for i, fec in enumerate(("none", "hamming74", "rs255", "conv")):
        t0 = time.perf_counter()
        c = measured_ber_curve(fec, "bpsk", grid, args.bits, seed=args.seed + i,
                               stop_at_zero=True)
        zero = np.flatnonzero(c["errors_post_fec"] == 0)
        curves[fec] = {
            "modulation": "bpsk", "interleave": 1 if fec == "rs255" else None,
            "rate_on_air": float(c["rate_on_air"][0]),
            "bits_info_per_point": int(c["bits_info"][0]),
            "ebn0_db": c["ebn0_db"].tolist(),
            "ber_channel": c["ber_channel"].tolist(),
            "ber_post_fec": c["ber_post_fec"].tolist(),
            "errors_post_fec": c["errors_post_fec"].tolist(),
            "required_ebn0_db": {f"{t:.0e}": required(c["ebn0_db"], c["ber_post_fec"],
                                                      c["errors_post_fec"], t) for t in TARGETS},
            "below_floor_at_db": float(grid[zero[0]]) if zero.size else None,
            "seconds": round(time.perf_counter() - t0, 1),
        }
        if fec == "rs255":
            fine = np.round(np.arange(0.0, 12.001, 0.01), 2)
            rate = c["rate_on_air"][0]
            theory = ber_rs_bounded_distance(ber_bpsk(fine + linear_to_db(rate)))
            curves[fec]["ber_post_fec_theory"] = ber_rs_bounded_distance(
                ber_bpsk(c["ebn0_db"] + linear_to_db(rate))).tolist()
            curves[fec]["required_ebn0_db_theory"] = {
                f"{t:.0e}": float(fine[np.argmax(theory <= t)]) if (theory <= t).any() else None
                for t in TARGETS}
        print(f"{fec}: {curves[fec]['required_ebn0_db']} ({curves[fec]['seconds']} s)")
    doc = {
        "what": "measured post-FEC bit error rate against Eb/N0 over AWGN, coherent BPSK; "
                "Eb is per information bit with every bit on air charged",
        "provenance": {
            "command": "python tools/make_fec_curves.py " + " ".join(sys.argv[1:] if argv is None
                                                                      else argv),
            "seed": args.seed, "bits_info_per_point": args.bits,
            "date_utc": dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "coefwire_version": version("coefwire"),
            "min_errors_for_interpolation": MIN_ERRORS,
        },
        "theory_bpsk_uncoded": {
            "ebn0_db": grid.tolist(), "ber": ber_bpsk(grid).tolist(),
            "required_ebn0_db": {f"{t:.0e}": float(ebn0_for_ber_bpsk(t)) for t in TARGETS}},
        "curves": curves,
    }
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_suffix(".tmp")
    tmp.write_text(json.dumps(doc, indent=1) + "\n", encoding="utf-8")
    tmp.replace(out)
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
