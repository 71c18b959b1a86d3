"""Write link_sim/data/fec_curves.json: measured BER against Eb/N0 for every FEC.

The link budget reads this file for the Eb/N0 a coded link needs.  Each curve
is a Monte-Carlo run over AWGN with coherent BPSK (Gray QPSK has the same BER
per bit); the file records how it was made (command, seed, limits, date,
coefwire version, CPU seconds).

Statistics
----------
Bit errors after a decoder come in clusters, so counting bits overstates how
much was learned.  Each Eb/N0 point therefore runs, in batches of fresh data
and noise, until it has seen at least ``--events`` (default 100) independent
**error events** or has sent the code's bit limit (``--bits-*``), whichever
comes first.  An event is:

* uncoded: one wrong bit;
* Hamming (7,4): one wrongly decoded codeword (4 information bits);
* RS(255,223): one codeword with any wrong information byte after decoding
  (a decoder failure or a miscorrection);
* K=7 convolutional: one decoded error burst, i.e. wrong bits with fewer than
  K - 1 = 6 correct bits between them (six correct bits in a row put the
  decoder back on the true trellis state, so the next error starts a new event).

Beside each BER the file gives the event count and a one-sided 95 % upper
bound: the exact Poisson upper limit on the event count,
``lambda_U = chi2.ppf(0.95, 2k + 2) / 2`` (Garwood 1936), times the point's
mean number of wrong bits per event, over the bits sent.  With k >= 100 events
the bound is about 1.17 times the estimate.  A point with no event uses
lambda_U = 3.0 (the rule of three) and the mean bits per event of the nearest
lower-Eb/N0 point.  The budget interpolates the upper bound, made non-increasing in
Eb/N0 (running maximum from the high-Eb/N0 end), so a requirement it reads is
conservative at 95 %.

Each curve ends at the first grid point with no event at all.  For
RS(255,223) the file also carries the bounded-distance estimate
(``ber_post_fec_theory``, see :func:`link_sim.ber_rs_bounded_distance`).

References
----------
F. Garwood, "Fiducial limits for the Poisson distribution", Biometrika 28
(1936) 437-442.  M. C. Jeruchim, P. Balaban, K. S. Shanmugan, *Simulation of
Communication Systems*, 2nd ed., 2000, ch. 11 (Monte Carlo BER estimation
and why clustered errors need event counts).

Usage: python tools/make_fec_curves.py [--events K] [--bits-none N] [--bits-hamming74 N]
       [--bits-rs255 N] [--bits-conv N] [--seed S] [--out PATH]
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
from scipy.stats import chi2

from link_sim import (
    awgn,
    ber_bpsk,
    ber_rs_bounded_distance,
    ebn0_for_ber_bpsk,
    linear_to_db,
    make_code,
)

TARGETS = (1e-3, 1e-4, 1e-5, 1e-6)
CONFIDENCE = 0.95
#: Default bit limits per point, chosen so a whole run takes about 10-15 min of one CPU
#: core (measured: conv decodes about 3.7 Mbit/s per CPU second, RS 13, Hamming and
#: uncoded more); the points that reach the limit before 100 events dominate the time.
BIT_LIMITS = {"none": 400_000_000, "hamming74": 200_000_000, "rs255": 600_000_000,
              "conv": 150_000_000}
#: Information bytes per batch: whole code blocks, a few MB of arrays at a time.
BATCH_BYTES = {"none": 2**21, "hamming74": 2**18, "rs255": 223 * 512, "conv": 256 * 256}
CONV_MERGE = 6  # K - 1 correct bits in a row end a convolutional error event


def poisson_upper(k: int, confidence: float = CONFIDENCE) -> float:
    """One-sided upper confidence limit of a Poisson mean after ``k`` events (Garwood 1936)."""
    return float(0.5 * chi2.ppf(confidence, 2 * k + 2))


def count_events(fec: str, sent: np.ndarray, got: np.ndarray) -> tuple[int, int, int]:
    """(events, bit errors, trials) between sent and decoded information bytes."""
    wrong = np.unpackbits(np.bitwise_xor(sent, got))
    bit_errors = int(wrong.sum())
    if fec == "none":
        return bit_errors, bit_errors, wrong.size
    if fec == "hamming74":
        words = wrong.reshape(-1, 4).any(axis=1)
        return int(words.sum()), bit_errors, words.size
    if fec == "rs255":
        words = np.bitwise_xor(sent, got).reshape(-1, 223).any(axis=1)
        return int(words.sum()), bit_errors, words.size
    # conv: bursts inside each 256-byte block (blocks are decoded independently)
    per_block = wrong.reshape(-1, 8 * 256)
    block, pos = np.nonzero(per_block)
    if pos.size == 0:
        return 0, 0, per_block.shape[0]
    new = np.ones(pos.size, bool)
    new[1:] = (block[1:] != block[:-1]) | (pos[1:] - pos[:-1] > CONV_MERGE)
    return int(new.sum()), bit_errors, per_block.shape[0]


def run_point(fec: str, code, ebn0: float, rng: np.random.Generator, min_events: int,
              bit_limit: int) -> dict:
    """Batches of fresh data at one Eb/N0 until ``min_events`` events or ``bit_limit`` bits."""
    nbytes = BATCH_BYTES[fec]
    events = errors = trials = bits = ch_err = ch_bits = 0
    rate = None
    while events < min_events and bits < bit_limit:
        data = rng.integers(0, 256, nbytes, dtype=np.uint8)
        air = code.encode(data)
        rate = 8.0 * nbytes / air.size
        received = awgn(air, ebn0, rng, "bpsk", rate=rate, soft=code.soft)
        hard = (received < 0).view(np.uint8) if received.dtype != np.uint8 else received
        ch_err += int(np.count_nonzero(hard != air))
        ch_bits += air.size
        out, _ = code.decode(received, nbytes)
        e, b, t = count_events(fec, data, out)
        events, errors, trials, bits = events + e, errors + b, trials + t, bits + 8 * nbytes
    return {"events": events, "errors": errors, "trials": trials, "bits": bits,
            "ber_channel": ch_err / ch_bits, "rate_on_air": rate}


def upper_bounds(events: np.ndarray, errors: np.ndarray, bits: np.ndarray) -> np.ndarray:
    """95 % upper bound on the BER of each point (see the module docstring).

    A point without events borrows the mean wrong bits per event of the nearest
    lower-Eb/N0 point that had events (events shrink as Eb/N0 rises: fewer channel
    errors per failed block or burst).
    """
    per_event = np.where(events > 0, errors / np.maximum(events, 1), np.nan)
    seen = np.flatnonzero(events > 0)
    if seen.size == 0:
        per_event[:] = 1.0
    else:
        nearest = np.maximum.accumulate(np.where(events > 0, np.arange(events.size), -1))
        per_event = np.where(nearest >= 0, per_event[np.maximum(nearest, 0)],
                             per_event[seen[0]])
    lam = np.array([poisson_upper(int(k)) for k in events])
    return np.minimum(0.5, lam * per_event / bits)


def monotone(upper: np.ndarray) -> np.ndarray:
    """Non-increasing in Eb/N0: the running maximum from the high end."""
    return np.maximum.accumulate(upper[::-1])[::-1]


def required(ebn0: np.ndarray, ber: np.ndarray, target: float) -> float | None:
    """First crossing of ``target`` by ``ber``, linear in log10(BER) between grid points."""
    for i in range(ebn0.size - 1):
        if ber[i] >= target >= ber[i + 1] and ber[i + 1] > 0:
            a, b = np.log10(ber[i]), np.log10(ber[i + 1])
            if a == b:
                return float(ebn0[i])
            return float(ebn0[i] + (np.log10(target) - a) / (b - a) * (ebn0[i + 1] - ebn0[i]))
    return None


def measure_curve(fec: str, grid: np.ndarray, seed: int, min_events: int,
                  bit_limit: int) -> dict:
    code = make_code(fec, 1)
    rng = np.random.default_rng(seed)
    rows = []
    for e in grid:
        rows.append(run_point(fec, code, float(e), rng, min_events, bit_limit))
        r = rows[-1]
        print(f"  {fec:>9} {e:5.2f} dB: {r['events']:>5} events, {r['errors']:>8} bit errors "
              f"in {r['bits']:>11} bits, BER {r['errors'] / r['bits']:.3g}", flush=True)
        if r["events"] == 0:
            break
    counts = {
        "rate_on_air": float(rows[0]["rate_on_air"]),
        "ebn0_db": grid[: len(rows)].tolist(),
        "ber_channel": [r["ber_channel"] for r in rows],
        "errors_post_fec": [r["errors"] for r in rows],
        "events": [r["events"] for r in rows],
        "trials": [r["trials"] for r in rows],
        "bits_info": [r["bits"] for r in rows],
    }
    return summarize(fec, counts, bit_limit)


def summarize(fec: str, counts: dict, bit_limit: int) -> dict:
    """A curve entry of the file from its counts: BER, bounds and required Eb/N0."""
    x = np.asarray(counts["ebn0_db"], dtype=np.float64)
    events = np.asarray(counts["events"])
    errors = np.asarray(counts["errors_post_fec"])
    bits = np.asarray(counts["bits_info"], dtype=np.float64)
    ber = errors / bits
    upper = upper_bounds(events, errors, bits)
    mono = monotone(upper)
    zero = np.flatnonzero(events == 0)
    return {
        "modulation": "bpsk", "interleave": 1 if fec == "rs255" else None,
        "rate_on_air": counts["rate_on_air"],
        "bits_info_per_point": int(bit_limit),  # the limit; bits_info gives each point's count
        "event": {"none": "bit error", "hamming74": "wrong codeword (4 information bits)",
                  "rs255": "codeword with a wrong information byte",
                  "conv": "decoded error burst (no 6 correct bits in a row inside)"}[fec],
        "ebn0_db": x.tolist(),
        "ber_channel": list(counts["ber_channel"]),
        "ber_post_fec": ber.tolist(),
        "errors_post_fec": errors.tolist(),
        "events": events.tolist(),
        "trials": list(counts["trials"]),
        "bits_info": bits.astype(np.int64).tolist(),
        "ber_post_fec_upper95": upper.tolist(),
        "ber_post_fec_upper95_monotone": mono.tolist(),
        "required_ebn0_db": {f"{t:.0e}": required(x, mono, t) for t in TARGETS},
        "required_ebn0_db_estimate": {f"{t:.0e}": required(x, ber, t) for t in TARGETS},
        "below_floor_at_db": float(x[zero[0]]) if zero.size else None,
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--events", type=int, default=100, help="error events wanted per point")
    for fec, limit in BIT_LIMITS.items():
        ap.add_argument(f"--bits-{fec}", type=int, default=limit, dest=f"bits_{fec}",
                        help=f"information bits at most per point for {fec} (default {limit})")
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--out", default=str(Path(__file__).resolve().parents[1]
                                         / "link_sim/data/fec_curves.json"))
    ap.add_argument("--recount", metavar="FILE",
                    help="simulate nothing: recompute the bounds and required Eb/N0 from the "
                         "event and bit counts recorded in FILE (same result as a rerun with "
                         "FILE's seed and limits, which draws the same numbers)")
    args = ap.parse_args(argv)
    if args.recount:
        return _recount(Path(args.recount), Path(args.out), argv)
    grid = np.round(np.arange(0.0, 12.01, 0.25), 2)
    curves = {}
    cpu0 = time.process_time()
    for i, fec in enumerate(("none", "hamming74", "rs255", "conv")):
        t0 = time.process_time()
        curves[fec] = measure_curve(fec, grid, args.seed + i, args.events,
                                    getattr(args, f"bits_{fec}"))
        curves[fec]["cpu_seconds"] = round(time.process_time() - t0, 1)
        if fec == "rs255":
            c = curves[fec]
            fine = np.round(np.arange(0.0, 12.001, 0.01), 2)
            rate = c["rate_on_air"]
            theory = ber_rs_bounded_distance(ber_bpsk(fine + linear_to_db(rate)))
            c["ber_post_fec_theory"] = ber_rs_bounded_distance(
                ber_bpsk(np.asarray(c["ebn0_db"]) + linear_to_db(rate))).tolist()
            c["required_ebn0_db_theory"] = {
                f"{t:.0e}": float(fine[np.argmax(theory <= t)]) if (theory <= t).any() else None
                for t in TARGETS}
        print(f"{fec}: required Eb/N0 (95 % upper bound) {curves[fec]['required_ebn0_db']}; "
              f"point estimate {curves[fec]['required_ebn0_db_estimate']} "
              f"({curves[fec]['cpu_seconds']} s CPU)", flush=True)
    doc = {
        "what": "measured post-FEC bit error rate against Eb/N0 over AWGN, coherent BPSK; "
                "Eb is per information bit with every bit on air charged",
        "provenance": {
            "command": "python tools/make_fec_curves.py " + " ".join(sys.argv[1:] if argv is None
                                                                      else argv),
            "seed": args.seed,
            "min_events_per_point": args.events,
            "min_errors_for_interpolation": 10,  # read by budgets of files without bounds
            "bit_limit_per_point": {fec: getattr(args, f"bits_{fec}") for fec in BIT_LIMITS},
            "upper_bound": "one-sided 95 % upper bound: exact Poisson upper limit on the "
                           "error-event count, chi2.ppf(0.95, 2k+2)/2 (Garwood, Biometrika 28, "
                           "1936), times the mean wrong bits per event, over the bits sent; "
                           "the budget reads it made non-increasing in Eb/N0",
            "date_utc": dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "coefwire_version": version("coefwire"),
            "cpu_seconds": round(time.process_time() - cpu0, 1),
        },
        "theory_bpsk_uncoded": {
            "ebn0_db": grid.tolist(), "ber": ber_bpsk(grid).tolist(),
            "required_ebn0_db": {f"{t:.0e}": float(ebn0_for_ber_bpsk(t)) for t in TARGETS}},
        "curves": curves,
    }
    _write(Path(args.out), doc)
    print(f"wrote {args.out} ({doc['provenance']['cpu_seconds']} s CPU)")
    return 0


def _write(out: Path, doc: dict) -> None:
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_suffix(".tmp")
    tmp.write_text(json.dumps(doc, indent=1) + "\n", encoding="utf-8")
    tmp.replace(out)


def _recount(src: Path, out: Path, argv) -> int:
    doc = json.loads(src.read_text(encoding="utf-8"))
    for fec, c in doc["curves"].items():
        c.update(summarize(fec, c, c["bits_info_per_point"]))
        print(f"{fec}: events {c['events']}")
        print(f"{fec}: required Eb/N0 (95 % upper bound) {c['required_ebn0_db']}; "
              f"point estimate {c['required_ebn0_db_estimate']}")
    doc["provenance"]["statistics_recomputed"] = {
        "command": "python tools/make_fec_curves.py " + " ".join(sys.argv[1:] if argv is None
                                                                  else argv),
        "date_utc": dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "coefwire_version": version("coefwire")}
    _write(out, doc)
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
