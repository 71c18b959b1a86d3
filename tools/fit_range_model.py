"""Measure the coefficient model of layout v3 (the tables of ``codec/entropy/rangecoder.py``).

Codes Gaussian AR(1) sources (rho 0.9, 0.95, 0.99; F 0.9, 0.95, 0.99, 0.999;
N = 64 and 256; 400 000 samples each, seeds 99-101, which the rate benchmark
does not use) with the v3 quantizer, groups the coded coefficients j >= 1 by
context class and prints, per (scale, band) cell with enough samples and per
scale over all bands, (s, z, a): the shift that brings the mean high part
below 8, P(high part = 0) x 2**16 and the geometric ratio x 2**16 of the
high part from 1 on (its mean m above 1 gives a = m / (1 + m)).  The output is
pasted into ``_CELL_PARAMS`` / ``_SCALE_PARAMS``: it is part of the layout.

    python tools/fit_range_model.py > /tmp/model.txt
    python tools/fit_range_model.py --trellis > /tmp/model4.txt   # layout 4

With ``--trellis`` the same sources are coded with dependent quantization
(layout 4) and the cells are split by the quantizer (0 or 1) of each level.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_rate import ar1_source  # noqa: E402

import codec.entropy.rangecoder as R  # noqa: E402
from codec.quantize.select import choose_steps, code_frame, frame_budgets, reference_energy  # noqa: E402
from codec.quantize.trellis import quantizer_ids  # noqa: E402
from codec.transform.bases import as_basis  # noqa: E402

MIN_SAMPLES = 400


def _params(mm: np.ndarray) -> tuple[int, int, int]:
    s = max(0, int(mm.mean()).bit_length() - 3)
    hi = mm >> s
    z = float((hi == 0).mean())
    tail = hi[hi > 0] - 1
    m1 = float(tail.mean()) if tail.size else 0.0
    a = int(round(m1 / (1 + m1) * 65536))
    return s, min(max(int(round(z * 65536)), 1), 65535), min(max(a, 1), 65535)


def _fit(cls: np.ndarray, mag: np.ndarray) -> tuple[dict, list]:
    """Cell and per-scale parameters of classes ``cls`` (0 .. scales x bands - 1)."""
    scale = cls // R._BANDS
    cells = {}
    for c in np.unique(cls):
        m = cls == c
        if m.sum() >= MIN_SAMPLES:
            cells[(int(c) // R._BANDS, int(c) % R._BANDS)] = _params(mag[m])
    scales = []
    last = max(sc for sc in range(R._SCALES) if (scale == sc).sum() >= MIN_SAMPLES)
    for sc in range(last + 1):
        m = scale == sc
        # a scale no context reaches (e.g. u in [6, 8)) takes the one below
        scales.append(_params(mag[m]) if m.sum() >= MIN_SAMPLES else scales[-1])
    return cells, scales


def main() -> None:
    trellis = "--trellis" in sys.argv[1:]
    cls_all, mag_all, qid_all = [], [], []
    for n in (256, 64):
        basis = as_basis("dct", n)
        dc = basis.analyze(np.ones(n))
        for i, rho in enumerate((0.9, 0.95, 0.99)):
            x = ar1_source(rho, 400_000, 99 + i)
            fr = x[: x.size // n * n].reshape(-1, n)
            cx = basis.analyze(fr)
            valid = np.full(len(fr), n)
            e = reference_energy(fr, valid, "total")
            for f in (0.9, 0.95, 0.99, 0.999):
                bud = frame_budgets(e, f, np.zeros(len(fr)), valid, np.abs(fr).max(1), n)
                if trellis:
                    code = choose_steps(cx, None, dc, bud, hint=choose_steps(cx, None, dc, bud),
                                        trellis=True)
                    q, _, _ = code_frame(cx, None, dc, code, trellis=True)
                else:
                    code = choose_steps(cx, None, dc, bud, 0.42)
                    q, _, _ = code_frame(cx, None, dc, code, 0.42, bud)
                mag = np.abs(q)
                nz = mag > 0
                count = np.where(nz.any(1), n - np.argmax(nz[:, ::-1], 1), 0)
                coded = np.arange(n) < count[:, None]
                coded[:, 0] = False
                # classes without the table-set offset; layout 4 splits them by quantizer
                cls_all.append(R._contexts(mag)[coded])
                qid_all.append(quantizer_ids(q)[coded] if trellis else np.zeros(0, np.int64))
                mag_all.append(mag[coded])
    cls = np.concatenate(cls_all)
    mag = np.concatenate(mag_all)
    if trellis:
        qid = np.concatenate(qid_all)
        fits = [_fit(cls[qid == t], mag[qid == t]) for t in (0, 1)]
        print("_TRELLIS_CELL_PARAMS: dict[tuple[int, int, int], tuple[int, int, int]] = {")
        for t, (cells, _) in enumerate(fits):
            for k, v in sorted(cells.items()):
                print(f"    {(t, *k)}: {v},")
        print("}")
        print("_TRELLIS_SCALE_PARAMS: tuple[tuple[tuple[int, int, int], ...], ...] = (")
        for _, scales in fits:
            print("    (")
            for v in scales:
                print(f"        {v},")
            print("    ),")
        print(")")
        return
    cells, scales = _fit(cls, mag)
    print("_CELL_PARAMS = {")
    for k, v in sorted(cells.items()):
        print(f"    {k}: {v},")
    print("}")
    print("_SCALE_PARAMS = (")
    for v in scales:
        print(f"    {v},")
    print(")")


if __name__ == "__main__":
    main()
