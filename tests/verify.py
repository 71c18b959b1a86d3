"""The independent checker: every budget and every reported figure, recomputed.

From the input samples, the profile and the decoded samples alone (and, for
bits, the size of the stream file) this module recomputes what a user is
promised and what the reports say.  It imports nothing from ``codec``: the
profile is only read for its settings, so an error in the codec's own budget,
report or selection code cannot hide here.

Published definitions used (written from memory; the README repeats them):

* **Fidelity guarantee** (the README's "Fidelity, SNR and PRD"): per budget
  block, Σ (x − x̂)² ≤ max((1 − F)·E_ref, N·res²/12), with E_ref = Σ x²
  (reference ``total``) or Σ (x − x̄)² (``ac``), and two floors that keep
  every budget reachable: float precision, N·(2⁻⁴⁰·peak)², and the finest
  step the layout can name, N·(2⁻⁶⁵)² (half of a 2⁻⁶⁴ step per term).
* **SNR**, textbook definition: 10·log₁₀(Σ x² / Σ (x − x̂)²) dB (N. S. Jayant
  and P. Noll, *Digital Coding of Waveforms*, Prentice-Hall 1984, ch. 2:
  signal variance over reconstruction-error variance); with x − x̄ in the
  numerator (x̄ the per-channel mean) it is the mean-removed ``snr_ac_db``.
* **PRD**, percentage root-mean-square difference of the ECG-compression
  literature: 100·√(Σ (x − x̂)² / Σ x²) % (S. M. S. Jalaleddine et al., "ECG
  data compression techniques — a unified approach", IEEE Trans. Biomed. Eng.
  37(4), 1990); **PRDN** puts Σ (x − x̄)² in the denominator (the normalised
  PRD, e.g. Y. Zigel, A. Cohen and A. Katz, IEEE Trans. Biomed. Eng. 47(10),
  2000).
* **Compression ratio**: raw sensor bits / coded bits, the ratio definition
  of the same literature; bits per sample: every bit of the stream file over
  samples × channels.

Budget scopes: ``window`` (each window of each channel has its own budget)
and ``frame`` (the windows of one channel carried in one frame share one
budget, max((1 − F)·Σ E_ref, Σ N·res²/12), with the two reachability floors
summed the same way).  The scope is read from the profile's
``fidelity_scope`` when it has one, else ``window``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest

__all__ = ["Blocks", "budget_blocks", "assert_budgets", "error_figures", "check_report",
           "check_decode_report", "check_compare_rows", "FLOAT_FLOOR", "scope_of"]

#: Float-precision floor, relative to a window's peak (README, "Fidelity, SNR and PRD").
FLOAT_FLOOR = 2.0**-40
#: Finest quantizer step a layout can name is 2**-64 units: half a step per term, squared.
LAYOUT_FLOOR_PER_TERM = (2.0**-65) ** 2
#: Relative tolerance between two summation orders of the same float64 error energy.
REL = 1e-9


@dataclass(frozen=True)
class Blocks:
    """Budget blocks of a stream, one entry per block (window-major, channel-minor).

    ``window`` is the first window of the block, ``windows`` how many it spans.
    """

    channel: np.ndarray
    window: np.ndarray
    windows: np.ndarray
    error: np.ndarray
    reference: np.ndarray
    budget: np.ndarray
    at_floor: np.ndarray
    fidelity: np.ndarray
    met: np.ndarray


def scope_of(profile) -> str:
    """The budget scope a profile asks for (``window`` before the scope setting existed)."""
    return getattr(profile, "fidelity_scope", "window") or "window"


def _windows(x: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """(windows, N, channels) view of ``x`` padded with zeros, and the valid mask."""
    s, c = x.shape
    w = -(-s // n)
    pad = np.zeros((w * n, c))
    pad[:s] = x
    valid = (np.arange(w * n) < s).reshape(w, n)
    return pad.reshape(w, n, c), valid


def budget_blocks(x, x_hat, profile, scope: str | None = None) -> Blocks:
    """Recompute every budget block of ``x_hat`` against ``x`` under ``profile``.

    ``scope`` overrides the profile's budget scope (``window`` or ``frame``).
    """
    x = np.asarray(x, dtype=np.float64)
    x_hat = np.asarray(x_hat, dtype=np.float64)
    assert x.shape == x_hat.shape, (x.shape, x_hat.shape)
    scope = scope or scope_of(profile)
    assert scope in ("window", "frame"), scope
    n = profile.frame_length
    f = float(profile.fidelity)
    chans = x.shape[1]
    res = (np.array([c.resolution for c in profile.channels], dtype=np.float64)
           if profile.channels else np.zeros(chans))
    xw, valid = _windows(x, n)
    ew = _windows(x - x_hat, n)[0]
    m = valid[:, :, None]
    count = valid.sum(axis=1)[:, None] * np.ones((1, chans))  # (windows, channels)
    err = np.where(m, ew * ew, 0.0).sum(axis=1)
    if profile.reference == "ac":
        mean = np.where(m, xw, 0.0).sum(axis=1) / count
        d = np.where(m, xw - mean[:, None, :], 0.0)
        ref = (d * d).sum(axis=1)
    else:
        ref = np.where(m, xw * xw, 0.0).sum(axis=1)
    peak = np.where(m, np.abs(xw), 0.0).max(axis=1)
    sensor = count * res[None, :] ** 2 / 12.0
    floats = count * (peak * FLOAT_FLOOR) ** 2
    layout = np.full(err.shape, n * LAYOUT_FLOOR_PER_TERM)
    nwin = err.shape[0]
    window = np.repeat(np.arange(nwin), chans).reshape(nwin, chans)
    channel = np.tile(np.arange(chans), nwin).reshape(nwin, chans)
    span = np.ones(err.shape, np.int64)
    if scope == "frame":
        # the windows one budget covers: the layout's declaration (a fact of the frame
        # layout, like N), not anything the encoder computed
        import codec

        lay = codec.layout_for(profile.layout_version)
        per = lay.windows_per_frame(profile) if lay.supports_frame_scope else 1
        group = np.arange(nwin) // per
        starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])

        def total(a):
            return np.add.reduceat(a, starts, axis=0)

        err, ref, sensor, floats, layout = (total(a) for a in (err, ref, sensor, floats, layout))
        span = total(span)
        window, channel = window[starts], channel[starts]
    floor = np.maximum.reduce([sensor, floats, layout])
    budget = np.maximum((1.0 - f) * ref, floor)
    at_floor = budget > (1.0 - f) * ref
    fidelity = np.where(ref > 0, 1.0 - err / np.where(ref > 0, ref, 1.0), 1.0)
    return Blocks(channel.ravel(), window.ravel(), span.ravel(), err.ravel(), ref.ravel(),
                  budget.ravel(), at_floor.ravel(), fidelity.ravel(), (err <= budget).ravel())


def assert_budgets(x, x_hat, profile, scope: str | None = None) -> Blocks:
    """Every budget block of ``x_hat`` meets its budget; peak-error limits hold too."""
    b = budget_blocks(x, x_hat, profile, scope)
    # The codec keeps a 1e-9 margin below each budget (another summation order may
    # differ in the last bits), so no tolerance is needed above the budget itself.
    over = np.flatnonzero(b.error > b.budget)
    assert not over.size, (
        f"{over.size} of {b.error.size} budget blocks miss: first at window "
        f"{b.window[over[0]]}, channel {b.channel[over[0]]}: error {b.error[over[0]]!r} > "
        f"budget {b.budget[over[0]]!r} (reference {b.reference[over[0]]!r})")
    for c, spec in enumerate(profile.channels):
        if getattr(spec, "max_error", None) is not None:
            worst = float(np.abs(np.asarray(x)[:, c] - np.asarray(x_hat)[:, c]).max())
            assert worst <= spec.max_error, (spec.name, worst, spec.max_error)
    return b


def _db(num: float, den: float) -> float | None:
    if den == 0.0 or num == 0.0:
        return None  # unbounded (exact reconstruction) or -inf: JSON null either way
    return 10.0 * math.log10(num / den)


def error_figures(x, x_hat) -> dict:
    """SNR, SNR AC, PRD, PRDN and peak error by the published definitions (module doc)."""
    x = np.asarray(x, dtype=np.float64)
    e = x - np.asarray(x_hat, dtype=np.float64)
    err = float((e * e).sum())
    sig = float((x * x).sum())
    xc = x - x.mean(axis=0)
    sig_ac = float((xc * xc).sum())
    return {
        "snr_db": _db(sig, err),
        "snr_ac_db": _db(sig_ac, err),
        "prd_percent": 100.0 * math.sqrt(err / sig) if sig else (0.0 if err == 0 else None),
        "prdn_percent": 100.0 * math.sqrt(err / sig_ac) if sig_ac else (0.0 if err == 0
                                                                      else None),
        "max_abs_error": float(np.abs(e).max()),
    }


def _close(got, want, key, rel=REL, abs_=1e-12) -> None:
    if want is None or (isinstance(want, float) and not math.isfinite(want)):
        assert got is None, (key, got, want)
        return
    assert got is not None, (key, got, want)
    assert got == pytest.approx(want, rel=rel, abs=abs_), (key, got, want)


def _fidelity_figures(b: Blocks, sel: np.ndarray) -> dict:
    # The reports count frames (one window of one channel): in frame scope a block of
    # `span` windows stands for `span` frames, each carrying its block's fidelity, so
    # the mean and the counts are weighted by the windows each block covers.
    judged = sel & ~b.at_floor
    w = b.windows.astype(np.float64)
    return {
        "fidelity_min": float(b.fidelity[judged].min()) if judged.any() else None,
        "fidelity_mean": (float((b.fidelity[judged] * w[judged]).sum() / w[judged].sum())
                          if judged.any() else None),
        "frames_at_floor": int(b.windows[sel & b.at_floor].sum()),
        "frames_below_target": int(b.windows[sel & ~b.met].sum()),
    }


def _check_figures(rep: dict, x, x_hat, b: Blocks, sel, raw_bits: float, where: str) -> None:
    for key, want in error_figures(x, x_hat).items():
        _close(rep[key], want, f"{where}: {key}")
    fid = _fidelity_figures(b, sel)
    for key in ("fidelity_min", "fidelity_mean"):
        _close(rep[key], fid[key], f"{where}: {key}")
    for key in ("frames_at_floor", "frames_below_target"):
        assert rep[key] == fid[key], (where, key, rep[key], fid[key])
    # Ratio and bits per sample against the bits this part of the report claims; the
    # whole stream's bits are checked against the file size by the caller.
    count = np.asarray(x).size
    bits = rep["bits_total"]
    _close(rep["bits_per_sample"], bits / count, f"{where}: bits_per_sample")
    _close(rep["compression_ratio"], raw_bits * count / bits if bits else None,
           f"{where}: compression_ratio")
    _close(rep["raw_bits_per_sample"], raw_bits, f"{where}: raw_bits_per_sample")


def check_report(report: dict, x, x_hat, profile, stream_bytes: int,
                 scope: str | None = None) -> Blocks:
    """Check an ``encode`` or ``roundtrip`` JSON report against recomputed figures.

    ``x_hat`` is what the decoder returned from the stream's bytes, ``stream_bytes``
    the stream file's size.  Returns the recomputed budget blocks.
    """
    x = np.asarray(x, dtype=np.float64)
    samples, chans = x.shape
    b = budget_blocks(x, x_hat, profile, scope)
    raw = np.array([c.raw_bits_per_sample for c in profile.channels], dtype=np.float64)
    assert report["samples"] == samples and report["channels"] == chans
    assert report["frames"] == b.error.size or scope_of(profile) != "window"
    assert report["bits_total"] == 8 * stream_bytes  # every bit of the file
    assert report["fidelity_target"] == profile.fidelity
    _check_figures(report, x, x_hat, b, np.ones(b.error.size, bool), float(raw.mean()), "all")
    per = report["per_channel"]
    assert list(per) == [c.name for c in profile.channels]
    for c, spec in enumerate(profile.channels):
        _check_figures(per[spec.name], x[:, c:c + 1], np.asarray(x_hat)[:, c:c + 1], b,
                       b.channel == c, float(raw[c]), spec.name)
        assert per[spec.name]["samples"] == samples
    assert sum(p["bits_total"] for p in per.values()) <= report["bits_total"]
    if "per_frame" in report and scope_of(profile) == "window":
        pf = report["per_frame"]
        idx = np.asarray(pf["window"]) * chans + np.asarray(pf["channel"])
        assert np.array_equal(np.sort(idx), np.arange(b.error.size))
        np.testing.assert_allclose(pf["fidelity"], b.fidelity[idx], rtol=REL, atol=1e-12)
        assert list(pf["at_floor"]) == b.at_floor[idx].tolist()
        assert list(pf["met"]) == b.met[idx].tolist()
        assert sum(pf["bits"]) <= report["bits_total"]
    return b


def check_decode_report(report: dict, x_hat, stream_bytes: int, samples: int) -> None:
    """A ``decode`` report of a clean stream: every sample delivered, every byte counted."""
    x_hat = np.asarray(x_hat)
    chans = x_hat.shape[1]
    assert report["samples"] == samples == x_hat.shape[0]
    assert report["channels"] == chans
    assert report["bits_total"] == 8 * stream_bytes
    assert report["samples_delivered"] == samples * chans == np.isfinite(x_hat).sum()
    assert report["samples_lost"] == 0 and report["samples_gap"] == 0
    assert report["frames_crc_failed"] == 0 and report["bytes_skipped"] == 0


def check_compare_rows(rows: list[dict], test, recon: dict, profile,
                       stream_bits: dict | None = None) -> None:
    """Check every ``compare`` row against figures recomputed from the held-out samples.

    ``recon`` maps (basis, fidelity) to the decoded held-out samples; ``stream_bits``
    optionally maps (basis, fidelity) to the bits of the stream coded from them.
    """
    test = np.asarray(test, dtype=np.float64)
    names = [c.name for c in profile.channels]
    raw = np.array([c.raw_bits_per_sample for c in profile.channels], dtype=np.float64)
    blocks = {}
    for r in rows:
        key = (r["basis"], r["fidelity_target"])
        if key not in blocks:
            prof = profile.model_copy(update={"fidelity": r["fidelity_target"]})
            blocks[key] = budget_blocks(test, recon[key], prof)
        b = blocks[key]
        c = None if r["channel"] == "all" else names.index(r["channel"])
        cols = slice(None) if c is None else slice(c, c + 1)
        sel = np.ones(b.error.size, bool) if c is None else b.channel == c
        where = f"{r['basis']} F={r['fidelity_target']} {r['channel']}"
        figs = error_figures(test[:, cols], recon[key][:, cols])
        for k in ("snr_db", "prd_percent", "max_abs_error"):
            _close(r[k], figs[k], f"{where}: {k}")
        fid = _fidelity_figures(b, sel)
        for k in ("fidelity_min", "fidelity_mean"):
            _close(r[k], fid[k], f"{where}: {k}")
        assert r["frames_below_target"] == fid["frames_below_target"], where
        assert r["frames_at_floor"] == fid["frames_at_floor"], where
        raw_bits = raw.sum() if c is None else raw[c]
        count = test[:, cols].size
        _close(r["compression_ratio"], raw_bits * test.shape[0] / (r["bits_per_sample"] * count),
               f"{where}: compression_ratio")
        if c is None and stream_bits is not None:
            _close(r["bits_per_sample"], stream_bits[key] / count, f"{where}: bits_per_sample")
    # bits saved against the identity basis of the same channel and target; the winner
    # is the basis with the fewest bits
    ident = {(r["channel"], r["fidelity_target"]): r["bits_per_sample"]
             for r in rows if r["basis"] == "identity"}
    for r in rows:
        key = (r["channel"], r["fidelity_target"])
        _close(r["bits_saved_percent"], 100.0 * (1.0 - r["bits_per_sample"] / ident[key]),
               f"{r['basis']} {key}: bits_saved_percent")
    for key in ident:
        rivals = [q for q in rows if (q["channel"], q["fidelity_target"]) == key]
        wins = [q for q in rivals if q["winner"]]
        assert len(wins) == 1, key
        assert wins[0]["bits_per_sample"] == min(q["bits_per_sample"] for q in rivals), key
