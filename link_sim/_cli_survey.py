"""``coefwire survey`` and ``coefwire report``: a fleet's archive, and the page about it.

Registered through the ``coefwire.commands`` entry-point group.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from codec import InputError, ProfileError, default_profile, load_profile
from codec.cli.common import parse_fidelities

from ._cli_budget import DEFAULT_FIDELITIES
from ._fleet_report import write_report
from ._survey import SurveySettings, expand_archive, resolve_survey_bases

__all__ = ["register_survey", "register_report"]

DEFAULT_BASES = "dct,haar,db4"


def register_survey(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "survey", help="survey an archive of recordings: bits per day and link verdict per group",
        description="Code every file of ARCHIVE with each basis at each fidelity (real encoder "
        "and decoder, every frame checked on the decoded samples), one Dask task per file, and "
        "write per file, channel, basis and fidelity rows (Parquet and CSV), a per-group "
        "summary with the highest fidelity whose stream fits the group's link, and report.html. "
        "Exit 1 if a file failed or a frame missed its target.")
    p.add_argument("archive", nargs="+", metavar="ARCHIVE",
                   help="recordings: .csv, .npy or .parquet files, folders or globs")
    p.add_argument("--out", required=True, metavar="DIR", help="survey folder (created)")
    p.add_argument("-p", "--profile", metavar="PROFILE",
                   help="profile TOML: frame length, reference, channels and sample rate")
    links = p.add_mutually_exclusive_group()
    links.add_argument("--link", metavar="LINK.toml", help="one link file for every group")
    links.add_argument("--links", metavar="DIR",
                       help="a folder with one link file per group, named GROUP.link.toml")
    p.add_argument("--bases", default=DEFAULT_BASES, metavar="A,B,...|all",
                   help=f"bases to compare (default {DEFAULT_BASES}; identity is always scored "
                   "as the reference)")
    p.add_argument("--fidelity", default=DEFAULT_FIDELITIES, metavar="F1,F2,...",
                   help=f"fidelity targets (default {DEFAULT_FIDELITIES})")
    p.add_argument("--group-by", metavar="PATTERN",
                   help="pattern over file names naming the group and period, e.g. "
                   "'{station}_{date}.csv' (default: one group, 'archive')")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="a running Dask scheduler, tcp://HOST:PORT (its workers must see the "
                   "archive under the same paths); default: a local cluster")
    p.add_argument("--workers", type=int, metavar="N",
                   help="worker processes of the local cluster (default: one per core; 1 runs "
                   "in this process)")
    p.add_argument("--resume", action="store_true",
                   help="continue the survey in DIR, skipping every file already done")
    p.add_argument("--quiet", action="store_true", help="no progress output")
    p.set_defaults(handler=_survey)


def register_report(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "report", help="write a survey's page: one self-contained HTML file",
        description="Write the page of the finished survey in DIR: verdict per group, bits per "
        "day, chosen profile per sensor class, rate-fidelity curves, reconstruction examples, "
        "the link budget and the cautions, in one HTML file that needs nothing else.")
    p.add_argument("folder", metavar="DIR", help="a survey folder (from 'coefwire survey')")
    p.add_argument("-o", "--output", required=True, metavar="OUT.html", help="the page")
    p.set_defaults(handler=_report)


def _links(groups: list[str], args) -> dict[str, str | None]:
    if args.link:
        if not Path(args.link).is_file():
            raise InputError("no such link file; check the path", args.link)
        return dict.fromkeys(groups, args.link)
    if args.links:
        folder = Path(args.links)
        if not folder.is_dir():
            raise InputError("--links needs a folder of GROUP.link.toml files", args.links)
        missing = [g for g in groups if not (folder / f"{g}.link.toml").is_file()]
        if missing:
            raise InputError(f"no link file for group(s) {', '.join(missing[:5])}"
                             f"{' ...' if len(missing) > 5 else ''}; add GROUP.link.toml for "
                             "each or give one file with --link", args.links)
        return {g: str(folder / f"{g}.link.toml") for g in groups}
    return dict.fromkeys(groups)


def _survey(args) -> int:
    from ._linkfile import load_link
    from ._survey_run import run_survey
    from ._survey_summary import finish_survey

    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers {args.workers}: give at least 1", "command line")
    if args.workers is not None and args.scheduler:
        raise InputError("--workers sizes the local cluster; a running cluster (--scheduler) "
                         "keeps its own workers, so give one or the other", "command line")
    profile = load_profile(args.profile) if args.profile else default_profile()
    if profile.basis == "klt":
        raise ProfileError("a survey compares fixed bases; give a profile whose basis is not "
                           "klt", args.profile)
    settings = SurveySettings(
        profile=profile.model_dump(mode="json"),
        bases=resolve_survey_bases(args.bases, profile.frame_length),
        fidelities=tuple(parse_fidelities(args.fidelity)), group_by=args.group_by)
    items = expand_archive(args.archive, args.group_by)
    out = Path(args.out)
    for item in items:
        if Path(item.path).resolve().is_relative_to(out.resolve()):
            raise InputError("the archive lies inside --out; name another --out folder",
                             item.path)
    groups = sorted({i.group for i in items})
    links = _links(groups, args)
    for path in sorted({p for p in links.values() if p}):
        load_link(path)  # a bad link file stops the survey before any work
    try:
        stats = run_survey(items, out, settings, scheduler=args.scheduler,
                           workers=args.workers, resume=args.resume, quiet=args.quiet)
    except KeyboardInterrupt:
        print(f"coefwire survey: the finished files are kept in {out / 'rows'}; run the same "
              "command with --resume to do the rest", file=sys.stderr)
        raise
    summary = finish_survey(out, items, settings, links, list(args.archive))
    write_report(out, out / "report.html")
    _print(summary, stats, out)
    missed = sum(g["frames_below_target"] or 0 for g in summary["groups"])
    return 1 if summary["files_failed"] or missed else 0


def _print(s: dict, stats, out: Path) -> None:
    lines = [f"surveyed {s['files']} files in {len(s['groups'])} groups ({stats.computed} coded "
             f"now, {stats.skipped} kept from before, {s['files_failed']} failed)"]
    lines.append(f"  {'group':<16} {'verdict':<13} {'limited by':<11} {'fidelity':>8} "
                 f"{'bits/day':>12} {'margin dB':>9}")
    for g in s["groups"]:
        verdict = ("no link" if g["fits"] is None else "fits" if g["fits"] else "does not fit")
        margin = "" if g["margin_db"] is None else f"{g['margin_db']:.1f}"
        per_day = "" if g["bits_per_day"] is None else f"{g['bits_per_day']:,.0f}"
        fid = "" if g["fidelity"] is None else f"{g['fidelity']:g}"
        lines.append(f"  {g['group']:<16} {verdict:<13} {str(g['limited_by'] or ''):<11} "
                     f"{fid:>8} {per_day:>12} {margin:>9}")
    lines.append(f"profile per sensor class at fidelity {s['fleet_fidelity']:g}: " + ", ".join(
        f"{c['channel']} {c['basis']}" for c in s["sensor_classes"]))
    for e in s["errors"]:
        lines.append(f"failed: {e['error']}")
    lines.append(f"rows: {out / 'rows.csv'} and {out / 'rows'}/ (Parquet); groups: "
                 f"{out / 'groups.csv'}; page: {out / 'report.html'}")
    lines += [f"caution: {c}" for c in s["cautions"]]
    sys.stdout.write("\n".join(lines) + "\n")


def _report(args) -> int:
    folder = Path(args.folder)
    if Path(args.output).resolve().parent == folder.resolve() and \
            Path(args.output).name == "summary.json":
        raise InputError("the page would overwrite the survey's summary; name another file",
                         args.output)
    write_report(folder, args.output)
    print(f"page written: {args.output}")
    return 0
