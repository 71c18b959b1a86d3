"""Where the high-rate bits go: two measured losses of the layout-3 coefficient coder.

For Gaussian AR(1) sources (rho 0.9, 0.95, 0.99; F 0.99 and 0.999; reference
``total``, N = 256, DCT, the v3 quantizer with its slack spending) this prints
ideal code lengths (-sum log2 p of the v3 model, which the range coder meets
to a few bits per frame), coefficients only, in bits/sample:

* ``v3``: the coefficients as layout 3 codes them;
* ``one budget``: every frame given the mean budget instead of its own
  (1 - F) share of its own energy -- the same total error, but no longer the
  per-frame guarantee; the difference is what the guarantee costs;
* ``refit``: the layout-3 contexts with (s, z, a) tables refitted on N = 256
  only (training seeds 99-101, as ``tools/fit_range_model.py``);
* ``inter``: a candidate context using the two previous windows of the same
  frame and channel (magnitudes at indices j - 2 ... j + 2) beside the
  previous four of the window (weighted 2): context sum
  T = 2 S + sum of those, count C = 2 min(j, 4) + their number, classes as
  layout 3 from u = 16 T // C; tables refitted the same way; the first window
  of a frame of 8 has no previous window.  Not a layout: an estimate of what
  such a layout version would save.

Evaluation seeds 7-9 (neither the rate benchmark's nor the fit's).

``--real`` instead prints, on the real recordings of ``tools/bench_real.py``
(default profile: DCT, N = 64, frame scope, F = 0.99), what candidate changes
of layout 3 would save, estimated on the stream's own integers (no table is
refitted, so no recording is fitting data):

* ``inter``: the coefficient context above with the same channel's previous
  window in the frame (magnitudes at j - 1 .. j + 1, counted twice) beside
  the previous four of the window, layout 3's tables (its scale classes are
  16 x a mean magnitude, whatever the magnitudes' source); ``coded``: the
  same through the range coder (the lane bytes of the same integers with
  these classes swapped in, against today's lane bytes: the ideal code
  lengths are what the coder spends); ``chosen``: the same with one
  frame-header bit choosing it per frame;
* ``step``: one frame-header bit saying every subframe of a channel in the
  frame has the first one's step, sent once (frame scope allocates one step
  per budget block);
* ``mean``: the mean fields sent as exp-Golomb of order k, k in a 4-bit
  frame-header field chosen per frame;

then the ratio to the benchmark's zstd baseline before and with all three,
and the medians.

    python tools/rate_losses.py [--real]
"""

from __future__ import annotations

import functools
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_rate import ar1_source  # noqa: E402
from fit_range_model import MIN_SAMPLES, _params  # noqa: E402

import codec.entropy.rangecoder as R  # noqa: E402
from codec import as_basis  # noqa: E402
from codec.quantize.select import choose_steps, code_frame, frame_budgets, reference_energy  # noqa: E402

N = 256
WINDOWS = 8
OFFSET = 0.42


def _inter_contexts(mag: np.ndarray, windows: int = WINDOWS, half: int = 2,
                    prev: int = 2, weight: int = 2, place: np.ndarray | None = None,
                    back: np.ndarray | int = 1, prev_weight: int = 1) -> np.ndarray:
    """Candidate classes: neighbours in the window plus the same band of earlier windows.

    ``place``: each row's window number in its frame (default: rows cut into
    frames of ``windows``); ``back``: rows between a row and the same
    channel's previous window (1, or the channel count of a multi-channel
    frame); the earlier windows' magnitudes count ``prev_weight`` times.
    """
    ns, n = mag.shape
    c = np.zeros((ns, n + 1), np.int64)
    np.cumsum(mag, axis=1, out=c[:, 1:])
    j = np.arange(1, n)
    total = (c[:, j] - c[:, np.maximum(j - R.CONTEXT_WINDOW, 0)]) * weight
    count = np.broadcast_to(np.minimum(j, R.CONTEXT_WINDOW) * weight, total.shape).copy()
    a, b = np.maximum(j - half, 0), np.minimum(j + half, n - 1)
    if place is None:
        place = np.arange(ns) % windows
    for lag in range(1, prev + 1):
        has = (place >= lag)[:, None]
        cp = c[np.maximum(np.arange(ns) - lag * np.asarray(back), 0)]
        total += np.where(has, (cp[:, b + 1] - cp[:, a]) * prev_weight, 0)
        count += np.where(has, (b - a + 1)[None, :] * prev_weight, 0)
    cls = np.full((ns, n), -1, np.int64)
    cls[:, 1:] = R._classes(total, (total << 4) // count, R.band_class(j, n))
    return cls


def _coded(q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    mag = np.abs(q).astype(np.int64)
    nz = mag > 0
    count = np.where(nz.any(1), q.shape[1] - np.argmax(nz[:, ::-1], 1), 0)
    coded = np.arange(q.shape[1]) < count[:, None]
    coded[:, 0] = False  # coefficient 0 is coded alike in every variant
    return mag, coded


def _quantized(rho: float, f: float, seed: int, samples: int, equal: bool = False):
    basis = as_basis("dct", N)
    dc = basis.analyze(np.ones(N))
    x = ar1_source(rho, samples, seed)
    fr = x[: x.size // N * N].reshape(-1, N)
    cx = basis.analyze(fr)
    valid = np.full(len(fr), N)
    e = reference_energy(fr, valid, "total")
    if equal:
        e = np.full_like(e, e.mean())
    bud = frame_budgets(e, f, np.zeros(len(fr)), valid, np.abs(fr).max(1), N)
    code = choose_steps(cx, None, dc, bud, OFFSET)
    return code_frame(cx, None, dc, code, OFFSET, bud)[0]


def _fit(cls: np.ndarray, mag: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(cost in bits per (class, symbol), shift per class) of tables fitted as layout 3's."""
    cells = {}
    for c in np.unique(cls):
        m = cls == c
        if m.sum() >= MIN_SAMPLES:
            cells[(int(c) // R._BANDS, int(c) % R._BANDS)] = _params(mag[m])
    scale = cls // R._BANDS
    last = max(sc for sc in range(R._SCALES) if (scale == sc).sum() >= MIN_SAMPLES)
    scales: list[tuple[int, int, int]] = []
    for sc in range(last + 1):
        m = scale == sc
        scales.append(_params(mag[m]) if m.sum() >= MIN_SAMPLES else scales[-1])
    rows, shifts = [], []
    for c in range(R._SCALES * R._BANDS):
        sc, band = divmod(c, R._BANDS)
        if (sc, band) in cells:
            s, z, a = cells[(sc, band)]
        elif sc < len(scales):
            s, z, a = scales[sc]
        else:
            base = len(scales) - 2
            s, z, a = scales[base + (sc - base) % 2]
            s += (sc - base) // 2
        rows.append(R.geometric_cum(a, z))
        shifts.append(s)
    with np.errstate(divide="ignore"):
        cost = R.TOTAL_BITS - np.log2(np.diff(np.array(rows, np.int64), axis=1).astype(float))
    return cost, np.array(shifts, np.int64)


def _bits(cls, mag, coded, cost, shift) -> float:
    cls, mag = cls[coded], mag[coded]
    s = shift[cls]
    hi = mag >> s
    esc = hi >= R.MODEL_SYMBOLS
    eb = R._bit_length(np.where(esc, hi - R.MODEL_SYMBOLS, 0))
    extra = np.where(esc, R._COST[R.LEN_ROW, 0] + np.maximum(eb - 1, 0), 0)
    return float((cost[cls, np.minimum(hi, R.MODEL_SYMBOLS)] + s + (mag > 0) + extra).sum())


def _frame_bits(cls, mag, coded, frame, nf) -> np.ndarray:
    """Coefficient bits of every frame (v3 tables), coefficient 0 left out."""
    cost, shift = R._COST[:-1], R.SHIFT[:-1]
    s = shift[np.maximum(cls, 0)]
    hi = mag >> s
    esc = hi >= R.MODEL_SYMBOLS
    eb = R._bit_length(np.where(esc, hi - R.MODEL_SYMBOLS, 0))
    extra = np.where(esc, R._COST[R.LEN_ROW, 0] + np.maximum(eb - 1, 0), 0)
    bits = cost[np.maximum(cls, 0), np.minimum(hi, R.MODEL_SYMBOLS)] + s + (mag > 0) + extra
    per = np.where(coded, bits, 0.0).sum(axis=1)
    return np.bincount(frame, per, minlength=nf)


def _lane_bits(q: np.ndarray, count: np.ndarray, frame: np.ndarray, mean: bool,
               classes=None) -> int:
    """Range-coded bits of every frame's coefficient lane, optionally with other classes."""
    from unittest import mock

    nf = int(frame.max()) + 1
    with mock.patch.object(R, "_contexts", classes or R._contexts):
        cum, freq, shift, row = R.coefficient_ops(q, count, mean=mean)
    return int(R.encode_lanes(cum, freq, shift, frame[row], nf)[1].sum()) * 8


def real_candidates() -> None:
    """The --real table."""
    from bench_real import (
        N_FRAME,
        bit_split,
        diff_zstd_bits,
        parse_stream,
        recordings,
        signed_exp_golomb_bits,
    )

    import codec

    print(f"real recordings, default profile (DCT, N = {N_FRAME}, frame scope, F = 0.99); "
          "estimated change in bits/sample of each candidate (ideal code lengths)")
    print(f"{'recording':<14} {'bps':>6} {'ratio':>6} {'inter':>7} {'coded':>7} {'chosen':>7} "
          f"{'step':>7} "
          f"{'mean':>7} {'all':>7} {'ratio':>6}")
    cols: dict[str, list[float]] = {"now": [], "chosen": [], "step": [], "mean": [], "all": []}
    for name, (_kind, x, _names, _step) in recordings().items():
        enc = codec.encode(x, codec.Profile(fidelity=0.99, frame_length=N_FRAME))
        dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
        dz = diff_zstd_bits(x, dec.samples)
        bps = len(enc.data) * 8 / x.size
        f = parse_stream(enc)
        fr, wo = f["frame"], f["window_offset"]
        nf = int(fr.max()) + 1
        back = np.where(f["multi"][fr], x.shape[1], 1)
        mag, coded = _coded(f["q"])
        b0 = _frame_bits(R._contexts(mag), mag, coded, fr, nf)
        cls = _inter_contexts(mag, half=1, prev=1, weight=1, place=wo, back=back,
                              prev_weight=2)
        d = _frame_bits(cls, mag, coded, fr, nf) - b0
        inter, chosen = d.sum() / x.size, (np.minimum(d, 0).sum() + nf) / x.size
        args = (f["q"], f["count"], fr, f["mean"] is not None)
        coded_bits = (_lane_bits(*args, classes=functools.partial(
            _inter_contexts, half=1, prev=1, weight=1, place=wo, back=back, prev_weight=2))
            - _lane_bits(*args)) / x.size
        # step: a frame whose channels keep one step sends each once, plus the flag bit
        sc = f["step_code"]
        prev = np.maximum(np.arange(sc.size) - back, 0)
        later = wo > 0
        same = np.bincount(fr, later & (sc != sc[prev]), minlength=nf) == 0
        step_bits = bit_split(enc)["step"] * x.size
        saved = np.bincount(fr, later, minlength=nf)[same].sum()  # 1-bit zero changes
        step = (nf - saved) / x.size
        # mean: the fields sent today, as exp-Golomb of order k chosen per frame
        mean = 0.0
        if f["mean"] is not None:
            m = f["mean"]
            sent = np.where(f["mean_pred"][fr] & later, m - m[prev], m)
            now = np.bincount(fr, signed_exp_golomb_bits(sent), minlength=nf)
            best = np.min([np.bincount(fr, signed_exp_golomb_bits(sent, k), minlength=nf)
                           for k in range(16)], axis=0)
            mean = ((best + 4).sum() - now.sum()) / x.size
        total = chosen + step + mean
        for k, v in (("now", bps), ("chosen", bps + chosen), ("step", bps + step),
                     ("mean", bps + mean), ("all", bps + total)):
            cols[k].append(v / dz)
        print(f"{name:<14} {bps:>6.3f} {bps / dz:>6.3f} {inter:>+7.3f} {coded_bits:>+7.3f} "
              f"{chosen:>+7.3f} "
              f"{step:>+7.3f} {mean:>+7.3f} {total:>+7.3f} {(bps + total) / dz:>6.3f}"
              f"   (step fields now {step_bits / x.size:.3f})")
    print("median ratio to zstd: " + ", ".join(
        f"{k} {np.median(v):.3f}" for k, v in cols.items()))
    print("largest ratio:        " + ", ".join(f"{k} {np.max(v):.3f}" for k, v in cols.items()))


def main() -> None:
    if "--real" in sys.argv[1:]:
        real_candidates()
        return
    rhos, fids = (0.9, 0.95, 0.99), (0.99, 0.999)
    train = {"v3": ([], []), "inter": ([], [])}
    for i, rho in enumerate(rhos):
        for f in (0.9, 0.95, 0.99, 0.999):
            mag, coded = _coded(_quantized(rho, f, 99 + i, 400_000))
            for key, cls in (("v3", R._contexts(mag)), ("inter", _inter_contexts(mag))):
                train[key][0].append(cls[coded])
                train[key][1].append(mag[coded])
    tables = {k: _fit(np.concatenate(c), np.concatenate(m)) for k, (c, m) in train.items()}
    v3_tables = (R._COST[:-1], R.SHIFT[:-1])
    print(f"AR(1), N={N}, DCT, reference total; coefficient bits/sample (ideal code lengths)")
    print(f"{'rho':>5} {'F':>6} {'v3':>7} {'one budget':>11} {'guarantee':>10} "
          f"{'refit':>7} {'inter':>7} {'saving':>7}")
    for i, rho in enumerate(rhos):
        for f in fids:
            q = _quantized(rho, f, 7 + i, 1_000_000)
            mag, coded = _coded(q)
            ns = q.size
            base = _bits(R._contexts(mag), mag, coded, *v3_tables) / ns
            refit = _bits(R._contexts(mag), mag, coded, *tables["v3"]) / ns
            inter = _bits(_inter_contexts(mag), mag, coded, *tables["inter"]) / ns
            mq, cq = _coded(_quantized(rho, f, 7 + i, 1_000_000, equal=True))
            one = _bits(R._contexts(mq), mq, cq, *v3_tables) / ns
            print(f"{rho:>5} {f:>6} {base:7.3f} {one:11.3f} {base - one:10.3f} "
                  f"{refit:7.3f} {inter:7.3f} {base - inter:7.3f}", flush=True)


if __name__ == "__main__":
    main()
