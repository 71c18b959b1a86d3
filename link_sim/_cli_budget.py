"""``coefwire budget``: does the stream fit this radio with margin, and at what fidelity?

Registered through the ``coefwire.commands`` entry-point group.  Prints the
auditable budget table, the margin and the maximum data rate, the pass table
for an orbit, and with ``--input`` the codec's measured bits per second at each
fidelity of a list, the margin at each and the highest fidelity that fits.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np

from codec import InputError, ProfileError, encode
from codec._io import atomic_output, read_samples
from codec.cli._common import add_profile_options, fmt, resolve_profile, write_json

from ._budget import Budget, compute_budget, pass_summary
from ._linkfile import load_link

__all__ = ["register", "CAUTIONS", "fidelity_rows"]

DEFAULT_FIDELITIES = "0.9,0.95,0.99,0.999"

CAUTIONS = (
    "Transmit power, antenna gain and frequency are regulated: what you may radiate, where "
    "and on which frequency is set by the regulations in force where you operate.",
    "Licensing, frequency coordination and RF-exposure limits are your responsibility under "
    "local regulations and licensed practice.",
    "This budget is a planning estimate from textbook formulas and your inputs, not a "
    "certification of the link or of the equipment.",
)


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "budget", help="link budget: margin, maximum data rate, passes, best fidelity",
        description="Compute the link budget of LINK (a .link.toml file) line by line. With "
        "--input and a profile, code the sample at each fidelity and name the highest "
        "fidelity whose bit rate keeps the required margin.",
        conflict_handler="resolve")  # our --fidelity (a list) replaces the codec's single value
    p.add_argument("link", metavar="LINK", help="link description file (TOML)")
    p.add_argument("--input", metavar="SAMPLE", help="a sample of the stream (.csv or .npy)")
    add_profile_options(p, "profile TOML of the stream (default: the built-in profile)")
    p.add_argument("--fidelity", default=DEFAULT_FIDELITIES, metavar="F1,F2,...",
                   help=f"fidelities to try with --input (default {DEFAULT_FIDELITIES})")
    p.add_argument("--sample-rate-hz", type=float, metavar="R",
                   help="samples per second of the stream (default: the profile's channels, "
                   "else the input's time column)")
    p.add_argument("--json", metavar="OUT", help="write the JSON report here")
    p.add_argument("--plot", metavar="OUT.png", help="write the plot here (.png, .svg or .pdf)")
    p.set_defaults(handler=_budget)


def _parse_fidelities(text: str) -> list[float]:
    values = []
    for part in text.split(","):
        try:
            f = float(part)
        except ValueError:
            raise ProfileError(f"--fidelity: {part.strip()!r} is not a number; give a comma-"
                               "separated list such as 0.9,0.99", "command line") from None
        if not 0.0 < f <= 1.0 or not math.isfinite(f):
            raise ProfileError(f"--fidelity: {f:g} is outside the allowed range 0 < F <= 1",
                               "command line")
        values.append(f)
    return sorted(set(values))


def _stream_rate_hz(args, profile, table) -> tuple[float, str]:
    """Samples per second: --sample-rate-hz, else the profile, else the time column."""
    if args.sample_rate_hz is not None:
        r = args.sample_rate_hz
        if not (math.isfinite(r) and r > 0):
            raise ProfileError(f"--sample-rate-hz must be a positive number (got {r:g})",
                               "command line")
        return r, "--sample-rate-hz"
    rates = {c.sample_rate_hz for c in profile.channels if c.sample_rate_hz is not None}
    if len(rates) > 1:
        raise ProfileError("the profile's channels give different sample_rate_hz values; "
                           "give the row rate with --sample-rate-hz", args.profile)
    if rates:
        return rates.pop(), "profile"
    t = table.time
    if t is not None and t.size >= 2:
        span = float(t[-1] - t[0])
        if span > 0 and np.all(np.diff(t) > 0):
            return (t.size - 1) / span, f"time column '{table.time_name}'"
        raise InputError("the time column does not increase, so it gives no sample rate; "
                         "give --sample-rate-hz", args.input)
    raise InputError("the stream's sample rate is unknown: give --sample-rate-hz, set "
                     "sample_rate_hz in the profile's channels, or add a time column",
                     args.input)


def fidelity_rows(budget: Budget, values: np.ndarray, profile, fidelities: list[float],
                  rate_hz: float) -> list[dict]:
    """Code ``values`` at each fidelity; bits per second and margin at that rate.

    Bits per second = bits in the coded stream / duration of the sample, where
    the duration is samples / ``rate_hz``: the information rate the radio must
    carry before FEC.
    """
    duration = values.shape[0] / rate_hz
    rows = []
    for f in fidelities:
        report = encode(values, profile.override(fidelity=f)).report
        bps = report["bits_total"] / duration
        margin = float(budget.margin_db(bps))
        rows.append({
            "fidelity": f,
            "bits_total": report["bits_total"],
            "bits_per_second": bps,
            "channel_bits_per_second": bps / budget.figures["code_rate"],
            "bits_per_frame_mean": report["bits_per_frame_mean"],
            "snr_db": report.get("snr_db"),
            # which budget the fidelity holds for: each window, or the windows of a frame
            "fidelity_scope": report.get("fidelity_scope"),
            "margin_db": margin,
            "fits": bool(margin >= budget.link.required_margin_db),
        })
    return rows


def _budget(args) -> int:
    if args.input is None:
        given = [o for o, v in (("-p", args.profile), ("--sample-rate-hz", args.sample_rate_hz),
                                ("--basis", args.basis), ("--reference", args.reference),
                                ("--frame-length", args.frame_length)) if v is not None]
        if args.fidelity != DEFAULT_FIDELITIES:
            given.append("--fidelity")
        if given:
            raise InputError(f"{', '.join(given)} describe the stream and need --input SAMPLE",
                             "command line")
    if args.plot:
        _check_plot_path(args.plot)
    link = load_link(args.link)
    budget = compute_budget(link)
    report = {"link_file": str(args.link), "description": link.description, **budget.figures,
              "budget_lines": [line.as_dict() for line in budget.lines]}
    rows = best = rate_info = None
    if args.input is not None:
        fidelities = _parse_fidelities(args.fidelity)
        table = read_samples(args.input)
        codec_args = argparse.Namespace(**{**vars(args), "fidelity": None})
        profile = resolve_profile(codec_args, table.names)
        rate_hz, rate_src = _stream_rate_hz(args, profile, table)
        rate_info = (rate_hz, rate_src)
        rows = fidelity_rows(budget, table.values, profile, fidelities, rate_hz)
        fitting = [r for r in rows if r["fits"]]
        best = fitting[-1] if fitting else None
        report.update({"input": str(args.input), "sample_rate_hz": rate_hz,
                       "sample_rate_source": rate_src, "fidelity_rows": rows,
                       "best_fidelity": best["fidelity"] if best else None})
    per_frame = best["bits_per_frame_mean"] if best else None
    passing = pass_summary(budget, bits_per_frame=per_frame)
    if passing and rows:
        # Store and dump: how many seconds of the stream one pass carries at the link's rate.
        for r in rows:
            r["stream_seconds_per_pass"] = passing["data_volume_bits"] / r["bits_per_second"]
    report["pass"] = passing
    report["cautions"] = list(CAUTIONS)
    _print(args, budget, rows, best, passing, rate_info)
    if args.plot:
        _plot(args.plot, budget, rows, passing)
    write_json(args.json, report)
    return 0


def _print(args, budget: Budget, rows, best, passing, rate_info) -> None:
    link = budget.link
    fig = budget.figures
    out = [f"link budget of {args.link}" + (f" ({link.description})" if link.description else "")]
    out.append(f"  {'item':<34} {'value':>14}  {'unit':<11} formula or source")
    for line in budget.lines:
        out.append(f"  {line.item:<34} {line.value:>14.6g}  {line.unit:<11} {line.source}")
    verdict = "keeps" if fig["fits"] else "does NOT keep"
    out.append(f"margin {fig['margin_db']:.2f} dB at {link.data_rate_bps:g} bit/s: {verdict} the "
               f"required {link.required_margin_db:g} dB")
    out.append(f"maximum data rate with the required margin: {fig['max_data_rate_bps']:.6g} bit/s "
               f"(information bits; {fig['max_data_rate_bps'] / fig['code_rate']:.6g} bit/s on "
               "air)")
    if passing:
        out.append(f"overhead pass above {passing['min_elevation_deg']:g} deg: "
                   f"{passing['pass_duration_s']:.1f} s of a {passing['orbital_period_s']:.1f} s "
                   "orbit (Earth rotation ignored)")
        out.append(f"  {'elevation deg':>13} {'range km':>10} {'path loss dB':>12} "
                   f"{'Eb/N0 dB':>9} {'margin dB':>10} {'t from zenith s':>15}")
        for r in passing["table"]:
            out.append(f"  {r['elevation_deg']:>13.1f} {r['slant_range_m'] / 1e3:>10.1f} "
                       f"{r['fspl_db']:>12.2f} {r['ebn0_db']:>9.2f} {r['margin_db']:>10.2f} "
                       f"{r['time_from_culmination_s']:>15.1f}")
        usable = passing["usable_duration_s"]
        text = (f"per pass at {passing['rate_bps']:g} bit/s: {usable:.1f} s with the required "
                f"margin, {passing['data_volume_bits']:.6g} bits "
                f"({passing['data_volume_bytes'] / 1e3:.1f} kB)")
        if "frames_per_pass" in passing:
            text += (f", {passing['frames_per_pass']} frames of "
                     f"{passing['bits_per_frame']:.0f} bits (mean at the best fidelity)")
        out.append(text)
    if rows is not None:
        rate_hz, rate_src = rate_info
        out.append(f"stream at each fidelity ({rate_hz:g} samples/s from {rate_src}; bit/s = "
                   "coded bits / sample duration; fidelity held per "
                   f"{rows[0]['fidelity_scope'] if rows else 'frame'}):")
        dump = passing is not None
        out.append(f"  {'fidelity':>9} {'bit/s':>12} {'on air bit/s':>13} {'margin dB':>10} "
                   f"{'SNR dB':>8}  fits" + ("  stream s per pass" if dump else ""))
        for r in rows:
            out.append(f"  {r['fidelity']:>9g} {r['bits_per_second']:>12.6g} "
                       f"{r['channel_bits_per_second']:>13.6g} {r['margin_db']:>10.2f} "
                       f"{fmt(r['snr_db'], '.2f'):>8}  {'yes' if r['fits'] else 'no ':<4}"
                       + (f"  {r['stream_seconds_per_pass']:>18.6g}" if dump else ""))
        if dump:
            out.append("  (margin and fits: the stream sent live at its own rate; stream s per "
                       "pass: seconds of stream one pass carries when stored and dumped at the "
                       "link's data rate)")
        if best:
            out.append(f"best fidelity that fits with {link.required_margin_db:g} dB margin: "
                       f"{best['fidelity']:g} ({best['bits_per_second']:.6g} bit/s)")
        else:
            out.append("no fidelity in the list fits with the required margin; lower the "
                       "fidelity, shorten the path or raise the link's C/N0")
    out += [f"caution: {c}" for c in CAUTIONS]
    sys.stdout.write("\n".join(out) + "\n")


def _check_plot_path(path: str) -> None:
    if Path(path).suffix.lower() not in (".png", ".svg", ".pdf"):
        raise InputError("the plot must be a .png, .svg or .pdf file", path)
    if not Path(path).resolve().parent.is_dir():
        raise InputError("the plot's folder does not exist; create it first", path)


def _plot(path: str, budget: Budget, rows, passing) -> None:
    """Margin over the pass (or against data rate) and bits per second against fidelity."""
    try:
        import matplotlib
    except ImportError:
        raise InputError("--plot needs matplotlib (pip install matplotlib)", path) from None
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    link = budget.link
    panels = 2 if rows else 1
    fig, axes = plt.subplots(1, panels, figsize=(5.5 * panels, 4.2), squeeze=False)
    ax = axes[0, 0]
    if passing:
        from ._budget import fspl_db
        from ._orbit import pass_track

        o = link.orbit
        track = pass_track(o.altitude_m, o.min_elevation_deg, o.station_altitude_m)
        rising = track.time_s <= 0
        elev = track.elevation_deg[rising]
        shift = budget.figures["fspl_db"] - fspl_db(track.slant_range_m[rising], link.frequency_hz)
        ax.plot(elev, budget.margin_db(link.data_rate_bps) + shift,
                label=f"margin at {link.data_rate_bps:g} bit/s")
        ax.set_xlabel("elevation (deg)")
        ax.set_title("margin over an overhead pass")
    else:
        rates = np.logspace(np.log10(link.data_rate_bps) - 2, np.log10(link.data_rate_bps) + 2,
                            200)
        ax.semilogx(rates, budget.margin_db(rates), label="margin")
        ax.axvline(link.data_rate_bps, color="grey", ls=":", label="link file data rate")
        ax.set_xlabel("information data rate (bit/s)")
        ax.set_title(f"margin at {budget.distance_m / 1e3:g} km")
    ax.axhline(link.required_margin_db, color="red", ls="--", label="required margin")
    ax.set_ylabel("margin (dB)")
    ax.grid(True, alpha=0.3)
    ax.legend()
    if rows:
        ax = axes[0, 1]
        f = [r["fidelity"] for r in rows]
        ax.semilogy(range(len(f)), [r["bits_per_second"] for r in rows], "o-",
                    label="codec bit rate")
        ax.axhline(budget.figures["max_data_rate_bps"], color="red", ls="--",
                   label="link capacity with required margin")
        ax.set_xticks(range(len(f)), [f"{v:g}" for v in f])
        ax.set_xlabel("fidelity (energy fraction kept)")
        ax.set_ylabel("bits per second (bit/s)")
        ax.set_title("stream rate against the link's capacity")
        ax.grid(True, alpha=0.3, which="both")
        ax.legend()
    fig.tight_layout()
    with atomic_output(path) as tmp:
        fig.savefig(tmp, format=Path(path).suffix.lower().lstrip("."), dpi=110)
    plt.close(fig)
