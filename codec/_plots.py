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

from ._compare import Comparison, energy_compaction
from ._io import atomic_output
from .transform.bases import as_basis
from .transform.framing import split_frames

__all__ = ["plot_comparison", "chosen_frame", "series_styles", "MAX_SERIES"]

#: Series one figure tells apart by colour *and* line style.
MAX_SERIES = 24
# 24 colours: the ten of matplotlib's "tab10" first (the most distinct), then the darker
# and lighter halves of "tab20b"/"tab20c" families that differ from them in hue.
_COLOURS = (
    "#1f77b4", "#ff7f0e", "#2ca02c", "#d62728", "#9467bd", "#8c564b", "#e377c2", "#7f7f7f",
    "#bcbd22", "#17becf", "#393b79", "#637939", "#8c6d31", "#843c39", "#7b4173", "#3182bd",
    "#e6550d", "#31a354", "#756bb1", "#000000", "#636363", "#fdae6b", "#9ecae1", "#c49c94",
)
_STYLES = ("-", "--", "-.", ":")
_MARKERS = ("o", "s", "^", "D", "v", "P")


def series_styles(names) -> dict:
    """Matplotlib keyword arguments per series: a colour of its own and a line style.

    Up to :data:`MAX_SERIES` series each get a different colour; the line
    style and marker also change from one series to the next, so neighbours in
    the legend differ in three ways and a grey-scale print still tells them
    apart.
    """
    names = list(names)
    if len(names) > MAX_SERIES:
        raise ValueError(f"{len(names)} series; a figure tells at most {MAX_SERIES} apart")
    return {b: {"color": _COLOURS[i], "ls": _STYLES[i % len(_STYLES)],
                "marker": _MARKERS[i % len(_MARKERS)], "markevery": 0.2,
                "lw": 2.2 if b in ("identity", "klt") else 1.4} for i, b in enumerate(names)}


def chosen_frame(cmp: Comparison) -> tuple[int, int]:
    """(channel, window) of the held-out full frame with the most energy about its mean."""
    n = cmp.frame_length
    frames, valid, channel, window = split_frames(cmp.test, n)
    ac = frames - frames.mean(axis=1, keepdims=True)
    energy = np.where(valid == n, np.einsum("ij,ij->i", ac, ac), -1.0)
    k = int(np.argmax(energy))
    return int(channel[k]), int(window[k])


def plot_comparison(cmp: Comparison, path: str | Path, profile=None,
                    profile_name: str | None = None) -> None:
    """Write the comparison figure to ``path`` (PNG), atomically.

    ``profile`` gives sample rates for the time axis (without one the axis is
    in samples) and the channels' units; ``profile_name`` (else the profile's
    description) goes into the title.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    style = series_styles(cmp.bases)
    label = profile_name or (profile.description if profile is not None else "") or \
        "built-in default profile"
    cols = 5
    grid_rows = -(-len(cmp.bases) // cols)
    fig = plt.figure(figsize=(16, 5.5 + 2.3 * grid_rows), layout="constrained")
    top, bottom = fig.subfigures(2, 1, height_ratios=[5.5, 2.3 * grid_rows])
    ax_rate, ax_comp = top.subplots(1, 2)
    _plot_rate(ax_rate, cmp, style)
    _plot_compaction(ax_comp, cmp, style)
    axes = np.atleast_1d(bottom.subplots(grid_rows, cols, sharex=True, sharey=True)).ravel()
    _plot_frame(bottom, axes, cmp, style, profile)
    fig.suptitle(f"Basis comparison, {label} (N = {cmp.frame_length}; trained bases fitted on "
                 f"the first {cmp.train_samples} samples, every basis scored on the other "
                 f"{cmp.test_samples})", fontsize=12)
    path = Path(path)
    with atomic_output(path) as tmp:
        fig.savefig(tmp, format="png", dpi=90)
    plt.close(fig)


def _plot_rate(ax, cmp: Comparison, style: dict) -> None:
    """Bits per sample against the fidelity target, all channels pooled, one line per basis."""
    overall = [r for r in cmp.rows if r["channel"] == "all"]
    for b in cmp.bases:
        rs = [r for r in overall if r["basis"] == b]
        ax.plot([r["fidelity_target"] for r in rs], [r["bits_per_sample"] for r in rs],
                label=b, **{**style[b], "markevery": None})
    ax.set_xlabel("fidelity target F (fraction of frame energy kept)")
    ax.set_ylabel("bits per sample (all stream bits, pooled over channels)")
    ax.set_title(f"Rate vs fidelity, all channels, held-out {cmp.test_samples} samples")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, ncol=2 if len(cmp.bases) <= 12 else 3)


def _plot_compaction(ax, cmp: Comparison, style: dict) -> None:
    """Energy retained against terms kept on the held-out full frames, one line per basis."""
    n = cmp.frame_length
    test_frames, valid, _, _ = split_frames(cmp.test, n)
    full = test_frames[valid == n]
    full = full - full.mean(axis=1, keepdims=True)
    k = np.arange(1, n + 1)
    for b in cmp.bases:
        ax.plot(k, 100 * energy_compaction(full, _basis(cmp, b)), label=b, **style[b])
    ax.set_xscale("log", base=2)
    ax.set_xlabel("terms kept per frame (largest first)")
    ax.set_ylabel("energy retained (% of frame energy about its mean)")
    ax.set_title("Energy compaction on held-out frames")
    ax.grid(alpha=0.3, which="both")
    ax.legend(fontsize=7, ncol=2 if len(cmp.bases) <= 12 else 3)


def _plot_frame(sub, axes, cmp: Comparison, style: dict, profile) -> None:
    """The chosen held-out frame at the lowest target: one panel per basis in ``axes``."""
    n = cmp.frame_length
    ch, win = chosen_frame(cmp)
    name = cmp.names[ch]
    rate = unit = None
    if profile is not None and profile.channels:
        rate = profile.channels[ch].sample_rate_hz
        unit = profile.channels[ch].unit
    idx = np.arange(win * n, win * n + n)
    pos = cmp.train_samples + idx  # position in the whole input
    t = pos / rate if rate else pos
    f = cmp.fidelities[0]
    original = cmp.test[idx, ch]
    for ax, b in zip(axes, cmp.bases):
        rec = cmp.reconstructions[(b, f)][idx, ch]
        line = {k: v for k, v in style[b].items() if k not in ("marker", "markevery")}
        ax.plot(t, original, color="0.55", lw=2.4, ls="-", label="original")
        ax.plot(t, rec, label="reconstruction", **{**line, "lw": 1.1})
        ax.plot(t, original - rec, color="crimson", lw=0.9, ls=":", label="error")
        row = next(r for r in cmp.rows if r["channel"] == name and r["basis"] == b
                   and r["fidelity_target"] == f)
        ax.set_title(f"{b}: {row['bits_per_sample']:.2f} bit/sample", fontsize=9)
        ax.grid(alpha=0.3)
    for ax in axes[len(cmp.bases):]:
        ax.set_visible(False)
    axes[0].legend(fontsize=7)
    sub.supxlabel("time from the start of the input (s)" if rate else "sample index in the input")
    sub.supylabel(f"{name} ({unit or 'no unit in the profile'})")
    sub.suptitle(f"One held-out frame (channel {name}, window {win}) at F = {f:g}: "
                 "original, reconstruction and error per basis", fontsize=11)


def _basis(cmp: Comparison, name: str):
    return cmp.trained.basis() if name == "klt" else as_basis(name, cmp.frame_length)
