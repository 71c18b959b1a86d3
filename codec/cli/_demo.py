"""``demo``: the whole job on the shipped demo scenarios.

For each invented scenario shipped in ``codec/data`` it encodes the samples
with the scenario's profile, writes the stream and its recorded profile,
decodes the stream back into a CSV, checks every frame on the decoded samples
and prints what the link has to carry.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from .._compare import compare_bases
from .._io import SampleTable, csv_decimals, read_samples, write_samples
from .._profile import load_profile
from .._timecol import time_fields
from ..report import compare_report
from ._codec_cmds import channel_figure_lines, roundtrip_report, write_stream
from .common import fmt, write_json

__all__ = ["register", "SCENARIOS", "scenario_files"]

SCENARIOS = ("ridge_station", "orbiter_hk")
#: Bases the demo compares: the five built-in ones, two wavelets and the trained KLT.
DEMO_BASES = "identity,dct,legendre,haar,walsh,db4,sym6,klt"


def register(sub) -> None:
    p = sub.add_parser("demo", help="run the whole job on the shipped demo scenarios",
                       description="Encode, decode and check the shipped (invented) demo "
                       "scenarios, writing every output to DIR.")
    p.add_argument("--out", metavar="DIR", default="coefwire-demo",
                   help="folder for the demo's outputs (default: ./coefwire-demo)")
    p.add_argument("--scenario", choices=SCENARIOS, action="append",
                   help="run only this scenario (repeatable)")
    p.add_argument("--no-compare", dest="compare", action="store_false",
                   help="skip the comparison of bases")
    p.set_defaults(handler=_demo)


def scenario_files(name: str) -> tuple[Path, Path]:
    """The shipped sample CSV and profile of a demo scenario."""
    base = resources.files("codec") / "data"
    return Path(str(base / f"{name}.csv")), Path(str(base / f"{name}.toml"))


def _demo(args) -> int:
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    status = 0
    for name in args.scenario or SCENARIOS:
        csv_path, profile_path = scenario_files(name)
        table = read_samples(csv_path)
        profile = load_profile(profile_path).bind(table.names)
        enc = write_stream(out / f"{name}.cwire", table, profile)
        report, ok, dec = roundtrip_report(table.values, profile, enc)
        tf = time_fields(table.time) if table.time is not None else {}
        write_samples(out / f"{name}.decoded.csv", SampleTable(
            dec.samples, table.names, table.time, table.time_name,
            decimals=[csv_decimals(c.resolution, c.max_error) for c in profile.channels],
            time_decimals=tf.get("time_decimals")))
        write_json(out / f"{name}.report.json", report)
        status = max(status, 0 if ok else 1)
        _print_summary(name, profile, table, report, out)
        files = [f"{name}.cwire", f"{name}.cwire.profile.toml", f"{name}.decoded.csv",
                 f"{name}.report.json"]
        if args.compare:
            status = max(status, _print_comparison(name, profile, table, out))
            files += [f"{name}.compare.json", f"{name}.compare.png"]
        print(f"   outputs in {out}: " + ", ".join(files))
    print("caution: this is lossy coding. Before relying on it for signals on which safety "
          "depends, justify the fidelity for that use; radio use is governed by local "
          "regulations and licensed practice.")
    return status


def _print_summary(name, profile, table, report, out) -> None:
    rate = profile.channels[0].sample_rate_hz
    seconds = table.values.shape[0] / rate if rate else None
    print(f"== {name}: {profile.description}")
    print(f"   {report['samples']} samples x {report['channels']} channels, {profile.basis} basis, "
          f"N = {profile.frame_length}, fidelity {profile.fidelity} ({profile.reference})")
    line = (f"   {report['bits_total']} bits = {report['bits_per_sample']:.2f} bits/sample "
            f"(raw {report['raw_bits_per_sample']:.1f}, ratio "
            f"{fmt(report['compression_ratio'], '.2f')})")
    if seconds:
        line += f", {report['bits_total'] / seconds:.1f} bit/s on the link"
    print(line)
    print(f"   every frame checked on the decoded samples: {report['frames_below_target']} of "
          f"{report['frames']} below target, {report['frames_at_floor']} held to the sensor "
          f"resolution; fidelity min {fmt(report['fidelity_min'], '.4f')}")
    print("\n".join("   " + ln for ln in channel_figure_lines(report)))


def _print_comparison(name, profile, table, out) -> int:
    """Which basis saves the most bits on this scenario (held-out half), with a figure."""
    from .._plots import plot_comparison  # matplotlib only when a figure is drawn

    # A representative set keeps the demo short (about 15 s instead of over a minute for
    # all 20 bases): 'coefwire compare INPUT --bases all' runs every one.
    cmp = compare_bases(table.values, profile, bases=DEMO_BASES, fidelities=(0.95, 0.99),
                        train_fraction=0.5, names=table.names, input_name=name, progress=True)
    plot = out / f"{name}.compare.png"
    plot_comparison(cmp, plot, profile=profile, profile_name=f"profile {name}.toml")
    write_json(out / f"{name}.compare.json", compare_report(cmp, profile))
    print(f"   bases compared on the last {cmp.test_samples} samples ('klt' trained on the first "
          f"{cmp.train_samples}); bits/sample over all channels:")
    overall = [r for r in cmp.rows if r["channel"] == "all"]
    for fid in cmp.fidelities:
        rows = sorted((r for r in overall if r["fidelity_target"] == fid),
                      key=lambda r: r["bits_per_sample"])
        best = ", ".join(f"{r['basis']} {r['bits_per_sample']:.2f}" for r in rows[:4])
        ident = next(r for r in rows if r["basis"] == "identity")
        print(f"   F = {fid}: {best}  ...  identity {ident['bits_per_sample']:.2f} "
              f"(best saves {rows[0]['bits_saved_percent']:.1f} %)")
    winners = [r for r in cmp.rows if r["winner"] and r["channel"] != "all"
               and r["fidelity_target"] == cmp.fidelities[-1]]
    print(f"   best basis per channel at F = {cmp.fidelities[-1]}: " + ", ".join(
        f"{r['channel']} {r['basis']}" for r in winners))
    print(f"   figure: {plot}")
    missed = sum(r["frames_below_target"] for r in cmp.rows)
    return 0 if missed == 0 else 1
