"""``compare``: which basis saves the most bits on this data, at each fidelity target."""

from __future__ import annotations

import argparse
import csv
from pathlib import Path

from .._compare import ROW_KEYS, compare_bases
from .._errors import InputError
from .._io import atomic_output, read_samples
from .._profile import default_profile, load_profile
from ..report import common_unit, compare_report, pooled_label, units_of, with_unit
from ._codec_cmds import _CAUTION
from .common import check_distinct, fmt, json_ready, write_json

__all__ = ["register"]


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "compare", help="compare bases by bits per sample at each fidelity target",
        description="Encode and decode INPUT with every basis at every fidelity target and "
        "report bits, fidelity, SNR, PRD and peak error per channel and overall. A trained "
        "basis (klt) is fitted on the first --train-fraction of the samples and every basis "
        "is scored on the rest. Exit 1 if any frame missed its target.")
    p.add_argument("input", metavar="INPUT", help=".csv or .npy samples")
    p.add_argument("-p", "--profile", metavar="PROFILE",
                   help="profile TOML for frame length, reference and channel specs")
    p.add_argument("--bases", default="all", metavar="A,B,...|all",
                   help="bases to compare (default all that fit the frame length; identity is "
                   "always scored as the reference)")
    p.add_argument("--fidelity", default="0.9,0.95,0.99", metavar="F1,F2,...",
                   help="fidelity targets (default 0.9,0.95,0.99)")
    p.add_argument("--frame-length", type=int, metavar="N", help="samples per frame")
    p.add_argument("--scope", choices=("window", "frame"), dest="fidelity_scope",
                   help="what one fidelity budget covers (the profile's fidelity_scope; "
                   "default frame)")
    p.add_argument("--train-fraction", type=float, default=0.5, metavar="FRACTION",
                   help="leading fraction of the samples used to fit trained bases; every "
                   "basis is scored on the rest (default 0.5)")
    p.add_argument("--json", metavar="OUT", help="write all rows as JSON")
    p.add_argument("--csv", metavar="OUT", help="write all rows as CSV")
    p.add_argument("--plot", metavar="OUT.png", help="write the comparison figure (PNG)")
    p.set_defaults(handler=_compare)


def _fidelities(text: str) -> list[float]:
    try:
        return [float(t) for t in text.split(",") if t.strip()]
    except ValueError:
        raise InputError(f"--fidelity {text!r} is not a comma-separated list of numbers; "
                         "give e.g. 0.95,0.99") from None


def _compare(args) -> int:
    for out in (args.json, args.csv, args.plot):
        if out:
            check_distinct(args.input, out)
    if args.plot and Path(args.plot).suffix.lower() != ".png":
        raise InputError("the plot is written as PNG; name a .png file", args.plot)
    table = read_samples(args.input)
    profile = load_profile(args.profile) if args.profile else default_profile()
    profile = profile.override(frame_length=args.frame_length,
                               fidelity_scope=args.fidelity_scope)
    cmp = compare_bases(table.values, profile, args.bases, _fidelities(args.fidelity),
                        args.train_fraction, names=table.names,
                        input_name=Path(args.input).name, progress=True)
    units = units_of(profile.bind(cmp.names))
    lines = _table(cmp, units)
    print("\n".join(lines))
    report = compare_report(cmp, profile, args.input)
    write_json(args.json, report)
    if args.csv:
        with atomic_output(args.csv) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
            w = csv.DictWriter(fh, fieldnames=list(ROW_KEYS))
            w.writeheader()
            w.writerows(json_ready(cmp.rows))
    if args.plot:
        from .._plots import plot_comparison

        plot_comparison(cmp, args.plot, profile.bind(table.names))
    missed = sum(r["frames_below_target"] for r in cmp.rows if r["channel"] == "all")
    if missed:
        print(f"{missed} frames missed their target on the decoded samples")
    print(_CAUTION)
    return 1 if missed else 0


def _table(cmp, units: dict) -> list[str]:
    """The printed comparison: pooled rows per basis, then each channel's fewest-bits basis.

    Errors carry the channel's unit; the pooled rows carry one only when every
    channel shares it, and are labelled pooled (:func:`codec.pooled_label`).
    """
    one = common_unit(units)
    head = (f"{'basis':<9} {'F':>6} {'bit/smp':>8} {'bit/frm':>8} {'p95':>7} {'ratio':>6} "
            f"{'saved%':>7} {'F min':>8} {'F mean':>8} {'SNR dB':>7} {'PRD %':>7} "
            f"{'max|err|':>14} {'enc ms':>7}")
    out = [f"scored on the last {cmp.test_samples} samples (held out); trained bases fitted on "
           f"the first {cmp.train_samples}; N = {cmp.frame_length}; bits include every header "
           "and CRC; saved% is against the identity basis; * = fewest bits; F is held per "
           f"{cmp.rows[0]['fidelity_scope'] if cmp.rows else 'frame'} (budget scope)",
           "", f"{pooled_label(units)}:", head]
    for r in cmp.rows:
        if r["channel"] == "all":
            out.append(_line(r, one))
    out += ["", "fewest bits per channel (max error in the channel's unit):"]
    width = max([7] + [len(n) for n in cmp.names])
    uw = max([4] + [len(u or "-") for u in units.values()])
    out.append(f"{'F':>6} {'channel':<{width}} {'unit':<{uw}} {'basis':<9} {'bit/smp':>8} "
               f"{'saved%':>7} {'SNR dB':>7} {'PRD %':>7} {'max|err|':>14}")
    for f in cmp.fidelities:
        wins = [r for r in cmp.winners() if r["fidelity_target"] == f and r["channel"] != "all"]
        wins.sort(key=lambda r: cmp.names.index(r["channel"]))
        for r in wins:
            unit = units.get(r["channel"])
            out.append(f"{f:>6g} {r['channel']:<{width}} {unit or '-':<{uw}} {r['basis']:<9} "
                       f"{r['bits_per_sample']:>8.3f} {r['bits_saved_percent']:>7.1f} "
                       f"{fmt(r['snr_db'], '.2f'):>7} {fmt(r['prd_percent'], '.3f'):>7} "
                       f"{with_unit(r['max_abs_error'], unit):>14}")
    floor = sum(r["frames_at_floor"] for r in cmp.rows if r["channel"] == "all")
    if floor:
        out.append(f"{floor} frames were held to the sensor-resolution floor instead of F "
                   "(left out of F min / F mean)")
    out.append("(per-channel rows for every basis are in --json / --csv)")
    return out


def _line(r: dict, unit: str | None) -> str:
    return (f"{r['basis']:<9} {r['fidelity_target']:>6g} {r['bits_per_sample']:>8.3f} "
            f"{r['bits_per_frame_mean']:>8.1f} {r['bits_per_frame_p95']:>7.0f} "
            f"{fmt(r['compression_ratio'], '.2f'):>6} {r['bits_saved_percent']:>7.1f} "
            f"{fmt(r['fidelity_min'], '.5f'):>8} {fmt(r['fidelity_mean'], '.5f'):>8} "
            f"{fmt(r['snr_db'], '.2f'):>7} "
            f"{fmt(r['prd_percent'], '.3f'):>7} {with_unit(r['max_abs_error'], unit):>14} "
            f"{1000 * r['encode_seconds']:>7.1f}{' *' if r['winner'] else ''}")
