"""``train``: fit a Karhunen-Loeve basis on history and write it as a basis file."""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from .._errors import InputError, ProfileError
from .._io import read_samples
from .._profile import load_profile
from ..report import common_unit, pooled_label, with_unit
from ..transform.framing import split_frames
from ..transform.klt import TrainedBasis, note_toml, save_trained_basis, train_klt
from .common import check_distinct

__all__ = ["register"]


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "train", help="fit a KLT basis on history and write it as a basis file",
        description="Fit the Karhunen-Loeve transform (principal components of frames of "
        "INPUT) and write BASIS_FILE (.cwbasis.npz with the matrix and a TOML provenance note). "
        "A profile uses it with basis = \"klt\", basis_file and basis_sha256.")
    p.add_argument("input", metavar="INPUT", help="history as .csv or .npy")
    p.add_argument("-o", "--output", required=True, metavar="BASIS_FILE",
                   help="basis file to write (.cwbasis.npz)")
    p.add_argument("--frame-length", type=int, default=64, metavar="N",
                   help="samples per frame (default 64)")
    p.add_argument("--channels", metavar="A,B,...",
                   help="train on these columns only (default: every column)")
    p.add_argument("-p", "--profile", metavar="PROFILE",
                   help="profile whose channels give each column's unit for the printed "
                   "figures (default: no units)")
    p.set_defaults(handler=_train)


#: Share of the training frames' energy about their means that the printed error figures keep.
ENERGY_KEPT = 0.99


def _train(args) -> int:
    check_distinct(args.input, args.output)
    if args.profile:
        check_distinct(args.profile, args.output)
    table = read_samples(args.input)
    values, names = table.values, table.names
    if args.channels:
        wanted = [c.strip() for c in args.channels.split(",") if c.strip()]
        missing = [c for c in wanted if c not in names]
        if missing or not wanted:
            raise InputError(f"no column named {', '.join(missing) or '(none)'}; the columns "
                             f"are {', '.join(names)}", args.input)
        cols = [names.index(c) for c in wanted]
        values, names = values[:, cols], wanted
    units = _units(args.profile, names)
    trained = train_klt(values, args.frame_length, names, input_name=Path(args.input).name)
    save_trained_basis(trained, args.output)
    note = trained.note
    print(f"trained a {note.frame_length}-term KLT basis on {note.frames_used} frames of "
          f"{len(names)} channels -> {args.output}")
    print("\n".join(training_lines(values, trained, units)))
    print(note_toml(trained), end="")
    print("\nto use it, put in the profile:\n"
          f'basis = "klt"\nbasis_file = "{args.output}"\n'
          f'basis_sha256 = "{note.sha256}"\nframe_length = {note.frame_length}')
    return 0


def _units(profile_path: str | None, names: list[str]) -> dict:
    """``{column: unit or None}`` from the profile's channels (all None without a profile)."""
    if not profile_path:
        return dict.fromkeys(names)
    specs = {c.name: c.unit for c in load_profile(profile_path).channels}
    missing = [n for n in names if n not in specs]
    if specs and missing:
        raise ProfileError(f"the profile lists no channel named {', '.join(missing)}; give the "
                           "profile of this history or leave out -p", profile_path)
    return {n: specs.get(n) for n in names}


def training_lines(values: np.ndarray, trained: TrainedBasis, units: dict) -> list[str]:
    """How compactly the basis holds the history: energy per term, and errors in channel units.

    The basis is trained on mean-removed frames scaled per channel to unit rms,
    so the energy shares are dimensionless; the rms figures are taken on the
    history's own frames and carry each channel's unit.
    """
    n = trained.note.frame_length
    ac = trained.energy[1:]  # eigenvalues of the terms after the constant one, largest first
    share = np.cumsum(ac) / ac.sum() if ac.sum() > 0 else np.ones(ac.size)
    need = {f: int(np.searchsorted(share, f - 1e-12)) + 1 for f in (0.9, 0.99, 0.999)}
    keep = need[ENERGY_KEPT]
    lines = ["energy about each frame's mean (training frames scaled to unit rms per channel): "
             + ", ".join(f"{100 * f:g} % in the first {k} of {n - 1} terms"
                         for f, k in need.items())]
    frames, valid, channel, _ = split_frames(np.asarray(values, dtype=np.float64), n)
    full = valid == n
    frames, channel = frames[full], channel[full]
    c = trained.basis().analyze(frames)  # orthonormal: energies add up term by term (Parseval)
    c2 = c * c
    names = list(trained.note.channels)
    count = np.bincount(channel, minlength=len(names)) * n
    ac_rms = np.sqrt(np.bincount(channel, c2[:, 1:].sum(axis=1), len(names)) / count)
    err_rms = np.sqrt(np.bincount(channel, c2[:, keep + 1:].sum(axis=1), len(names)) / count)
    width = max([7] + [len(m) for m in names])
    uw = max([4] + [len(u or "-") for u in units.values()])
    lines.append(f"keeping the constant term and the first {keep} others "
                 f"({100 * ENERGY_KEPT:g} % of the energy above), per channel:")
    lines.append(f"{'channel':<{width}} {'unit':<{uw}} {'frames':>7} {'rms about mean':>16} "
                 f"{'rms error':>16}")
    for i, m in enumerate(names):
        u = units.get(m)
        lines.append(f"{m:<{width}} {u or '-':<{uw}} {count[i] // n:>7} "
                     f"{with_unit(float(ac_rms[i]), u):>16} {with_unit(float(err_rms[i]), u):>16}")
    one = common_unit(units)
    pooled = float(np.sqrt(c2[:, keep + 1:].sum() / (frames.shape[0] * n)))
    lines.append(f"{pooled_label(units)}: rms error {with_unit(pooled, one)}")
    return lines
