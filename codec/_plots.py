"""Pictures of a basis comparison (matplotlib, Agg backend: no display needed).

One PNG with three parts:

* rate-fidelity: bits per sample against the fidelity target, one line per basis;
* energy compaction: energy retained against terms kept (each frame keeping
  its largest terms, as the encoder does), on the held-out frames;
* one chosen held-out frame: the original, each basis's reconstruction at the
  lowest target, and its error, in the channel's own units.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._bases import as_basis
from ._compare import Comparison, energy_compaction
from ._framing import split_frames
from ._io import atomic_output

__all__ = ["plot_comparison", "chosen_frame"]


def chosen_frame(cmp: Comparison) -> tuple[int, int]:
    """(channel, window) of the held-out full frame with the most energy about its mean."""
    n = cmp.frame_length
    frames, valid, channel, window = split_frames(cmp.test, n)
    ac = frames - frames.mean(axis=1, keepdims=True)
    energy = np.where(valid == n, np.einsum("ij,ij->i", ac, ac), -1.0)
    k = int(np.argmax(energy))
    return int(channel[k]), int(window[k])


def plot_comparison(cmp: Comparison, path: str | Path, profile=None) -> None:
    """Write the comparison figure to ``path`` (PNG), atomically.

    ``profile`` gives sample rates for the time axis; without one the axis
    is in samples.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    bases = cmp.bases
    # Ten strong colours times three line styles tell up to 30 bases apart.
    tab = plt.get_cmap("tab10").colors
    style = {b: {"color": tab[i % 10], "ls": ("-", "--", ":")[i // 10 % 3],
                 "lw": 2.2 if b in ("identity", "klt") else 1.3} for i, b in enumerate(bases)}
    n = cmp.frame_length
    cols = 5
    grid_rows = -(-len(bases) // cols)
    fig = plt.figure(figsize=(16, 5.5 + 2.3 * grid_rows), layout="constrained")
    top, bottom = fig.subfigures(2, 1, height_ratios=[5.5, 2.3 * grid_rows])
    ax_rate, ax_comp = top.subplots(1, 2)

    overall = [r for r in cmp.rows if r["channel"] == "all"]
    for b in bases:
        rs = [r for r in overall if r["basis"] == b]
        ax_rate.plot([r["fidelity_target"] for r in rs], [r["bits_per_sample"] for r in rs],
                     marker="o", label=b, **style[b])
    ax_rate.set_xlabel("fidelity target F (fraction of frame energy kept)")
    ax_rate.set_ylabel("bits per sample (all stream bits)")
    ax_rate.set_title(f"Rate vs fidelity, all channels, held-out {cmp.test_samples} samples")
    ax_rate.grid(alpha=0.3)
    ax_rate.legend(fontsize=7, ncol=2)

    test_frames, valid, _, _ = split_frames(cmp.test, n)
    full = test_frames[valid == n]
    full = full - full.mean(axis=1, keepdims=True)
    k = np.arange(1, n + 1)
    for b in bases:
        basis = _basis(cmp, b)
        ax_comp.plot(k, 100 * energy_compaction(full, basis), label=b, **style[b])
    ax_comp.set_xscale("log", base=2)
    ax_comp.set_xlabel("terms kept per frame (largest first)")
    ax_comp.set_ylabel("energy retained (% of frame energy about its mean)")
    ax_comp.set_title("Energy compaction on held-out frames")
    ax_comp.grid(alpha=0.3, which="both")
    ax_comp.legend(fontsize=7, ncol=2)

    ch, win = chosen_frame(cmp)
    name = cmp.names[ch]
    rate = None
    if profile is not None and profile.channels:
        rate = profile.channels[ch].sample_rate_hz
    idx = np.arange(win * n, win * n + n)
    pos = cmp.train_samples + idx  # position in the whole input
    t = pos / rate if rate else pos
    unit = "time from the start of the input (s)" if rate else "sample index in the input"
    f = cmp.fidelities[0]
    axes = np.atleast_1d(bottom.subplots(grid_rows, cols, sharex=True, sharey=True)).ravel()
    original = cmp.test[idx, ch]
    for ax, b in zip(axes, bases):
        rec = cmp.reconstructions[(b, f)][idx, ch]
        ax.plot(t, original, color="0.55", lw=2.4, label="original")
        ax.plot(t, rec, color="navy", lw=1.0, label="reconstruction")
        ax.plot(t, original - rec, color="crimson", lw=0.9, label="error")
        row = next(r for r in cmp.rows if r["channel"] == name and r["basis"] == b
                   and r["fidelity_target"] == f)
        ax.set_title(f"{b}: {row['bits_per_sample']:.2f} bit/sample", fontsize=9)
        ax.grid(alpha=0.3)
    for ax in axes[len(bases):]:
        ax.set_visible(False)
    axes[0].legend(fontsize=7)
    bottom.supxlabel(unit)
    bottom.supylabel(f"{name} (sensor units)")
    bottom.suptitle(f"One held-out frame (channel {name}, window {win}) at F = {f:g}: "
                    "original, reconstruction and error per basis", fontsize=11)
    fig.suptitle(f"Basis comparison (N = {n}; trained bases fitted on the first "
                 f"{cmp.train_samples} samples, every basis scored on the other "
                 f"{cmp.test_samples})", fontsize=12)
    path = Path(path)
    with atomic_output(path) as tmp:
        fig.savefig(tmp, format="png", dpi=90)
    plt.close(fig)


def _basis(cmp: Comparison, name: str):
    return cmp.trained.basis() if name == "klt" else as_basis(name, cmp.frame_length)
