"""``coefwire budget``: does the stream fit this radio with margin, and at what fidelity?

Registered through the ``coefwire.commands`` entry-point group.  Prints the
auditable budget table (human units; the JSON keeps SI), the margin at the
radio's configured rate and the maximum data rate, the pass table for an orbit,
and with ``--input`` the codec's measured bits per second at each fidelity of a
list, whether each fits the radio (rate, margin, pass volume: see
:func:`link_sim._budget.judge_stream`), and the highest fidelity that fits.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np

from codec import InputError, ProfileError, atomic_output, encode, read_samples
from codec.cli.common import (
    add_profile_options,
    fmt,
    parse_fidelities,
    resolve_profile,
    write_json,
)

from ._budget import Budget, compute_budget, judge_stream, pass_summary
from ._linkfile import load_link

__all__ = ["register", "CAUTIONS", "FIT_CONDITIONS", "fidelity_rows", "human"]

#: The fidelity targets ``budget`` (and ``survey``) try when none are given.
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
        "fidelity whose stream fits the radio: its bits on air within the radio's configured "
        "rate, the margin at that rate kept, and for an orbit one orbit's data within what "
        "its passes carry.",
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
                  rate_hz: float, passing: dict | None = None) -> list[dict]:
    """Code ``values`` at each fidelity and judge each stream against the radio.

    Bits per second = bits in the coded stream / duration of the sample, where
    the duration is samples / ``rate_hz``: the information rate the radio must
    carry before FEC.  Each row then gets :func:`judge_stream`'s verdict:
    ``fits``, ``limited_by`` (``rate``, ``margin``, ``pass_volume`` or None),
    the bits on air per second, the radio's spare capacity and the margin at
    the radio's configured rate.
    """
    duration = values.shape[0] / rate_hz
    rows = []
    for f in fidelities:
        report = encode(values, profile.override(fidelity=f)).report
        bps = report["bits_total"] / duration
        verdict = judge_stream(budget, bps, report["frames"] / duration, passing)
        rows.append({
            "fidelity": f,
            "bits_total": report["bits_total"],
            "bits_per_second": bps,
            "bits_per_frame_mean": report["bits_per_frame_mean"],
            "snr_db": report.get("snr_db"),
            # which budget the fidelity holds for: each window, or the windows of a frame
            "fidelity_scope": report.get("fidelity_scope"),
            **verdict.as_dict(),
        })
    return rows


def _best(rows: list[dict], budget: Budget) -> tuple[dict | None, str | None]:
    """The highest fidelity whose row fits, or None and the reason in one sentence."""
    fitting = [r for r in rows if r["fits"]]
    if fitting:
        return max(fitting, key=lambda r: r["fidelity"]), None
    link = budget.link
    fig = budget.figures
    if "margin" in rows[0]["failed_conditions"]:
        return None, (
            f"the link lacks margin at the radio's rate ({fig['margin_db']:.2f} dB at "
            f"{link.data_rate_bps:g} bit/s, {link.required_margin_db:g} dB required), whatever "
            "the fidelity: lower data_rate_bps, or raise the power, the antenna gains or the "
            "minimum elevation")
    low = rows[0]
    if "rate" in low["failed_conditions"]:
        allow = fig["max_data_rate_bps"]
        need = low["channel_bits_per_second"] * fig["code_rate"]  # as information bit/s
        hint = (f"raise data_rate_bps to at least {_bps(need)} (the margin allows up to "
                f"{_bps(allow)})" if allow >= need else
                f"improve the link (the margin allows the radio only {_bps(allow)})")
        return None, (
            f"even the lowest fidelity tried ({low['fidelity']:g}) needs "
            f"{_bps(low['channel_bits_per_second'])} on air, more than the radio's "
            f"{_bps(low['radio_on_air_bps'])}: lower the fidelity or the sample rate, or {hint}")
    return None, (
        f"even the lowest fidelity tried ({low['fidelity']:g}) produces more bits per orbit "
        f"({low['orbit_bits_on_air']:.4g} on air) than the passes of one orbit carry "
        f"({low['pass_bits_on_air']:.4g}): lower the fidelity or the sample rate, or add "
        "passes (stations)")


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
    report["radio_on_air_bps"] = budget.figures["channel_bit_rate_bps"]
    report["packet_overhead_bits"] = link.packet_overhead_bits
    report["fit_conditions"] = dict(FIT_CONDITIONS)
    rows = best = rate_info = reason = None
    passing = pass_summary(budget)
    if args.input is not None:
        fidelities = parse_fidelities(args.fidelity)
        table = read_samples(args.input)
        codec_args = argparse.Namespace(**{**vars(args), "fidelity": None})
        profile = resolve_profile(codec_args, table.names)
        rate_hz, rate_src = _stream_rate_hz(args, profile, table)
        rate_info = (rate_hz, rate_src)
        rows = fidelity_rows(budget, table.values, profile, fidelities, rate_hz, passing)
        best, reason = _best(rows, budget)
        report.update({"input": str(args.input), "sample_rate_hz": rate_hz,
                       "sample_rate_source": rate_src, "fidelity_rows": rows,
                       "best_fidelity": best["fidelity"] if best else None,
                       "best_fidelity_reason": reason})
    if passing and best:
        per = best["bits_per_frame_mean"]
        passing["bits_per_frame"] = float(per)
        passing["frames_per_pass"] = int(passing["data_volume_bits"] // per)
    if passing and rows:
        # Store and dump: how many seconds of the stream one pass carries at the radio's rate.
        for r in rows:
            r["stream_seconds_per_pass"] = (passing["data_volume_on_air_bits"]
                                            / r["channel_bits_per_second"])
    report["pass"] = passing
    report["cautions"] = list(CAUTIONS)
    _print(args, budget, rows, best, reason, passing, rate_info)
    if args.plot:
        _plot(args.plot, budget, rows, passing)
    write_json(args.json, report)
    return 0


#: What each value of ``limited_by`` means (also written to the JSON report).
FIT_CONDITIONS = {
    "rate": "the stream's bits on air per second (codec bits / code rate + packet overhead "
            "per frame) exceed the radio's configured rate on air (data_rate_bps / code rate)",
    "margin": "the margin at the radio's configured rate, at the worst distance, is below "
              "required_margin_db",
    "pass_volume": "the bits on air the stream produces in one orbital period exceed what the "
                   "passes of one period carry at the radio's rate (overhead passes: a best "
                   "case; passes_per_day from the link file, else one pass per orbit)",
}

_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"))


def _grouped(value: float) -> str:
    """An integer-valued figure with thin groups of three digits: 32 000."""
    return f"{value:,.0f}".replace(",", " ")


def _bps(value: float) -> str:
    return f"{_grouped(value) if abs(value) >= 100 else f'{value:.4g}'} bit/s"


def human(value: float, unit: str) -> str:
    """``value`` in ``unit`` (SI) written for a reader: 437 MHz, 1815.1 km, 7.9 min, 23.9 days.

    The JSON report keeps the SI values; this is for the printed table only.
    """
    if value is None or not math.isfinite(value):
        return f"{value} {unit}"
    a = abs(value)
    if unit == "Hz":
        for scale, p in _PREFIXES:
            if a >= scale:
                return f"{value / scale:.6g} {p}Hz"
        return f"{value:.6g} Hz"
    if unit == "m":
        return f"{value / 1e3:.1f} km" if a >= 1e4 else (
            f"{value / 1e3:.3f} km" if a >= 1e3 else f"{value:.4g} m")
    if unit == "s":
        if a >= 2 * 86400.0:
            return f"{value / 86400.0:.1f} days"
        if a >= 2 * 3600.0:
            return f"{value / 3600.0:.1f} h"
        if a >= 120.0:
            return f"{value / 60.0:.1f} min"
        return f"{value:.1f} s"
    if unit == "bit/s":
        return _bps(value)
    if unit == "bits":
        for scale, p in _PREFIXES:
            if a >= scale:
                return f"{value / scale:.4g} {p}bit"
        return f"{value:.0f} bit"
    if unit.startswith("dB"):
        return f"{value:.2f} {unit}"
    if unit == "K":
        return f"{value:.1f} K"
    if unit == "-":
        return f"{value:.4g}"
    return f"{value:.6g} {unit}"


def _print(args, budget: Budget, rows, best, reason, passing, rate_info) -> None:
    link = budget.link
    fig = budget.figures
    out = [f"link budget of {args.link}" + (f" ({link.description})" if link.description else "")]
    out.append(f"  {'item':<34} {'value':>20}  formula or source")
    for line in budget.lines:
        out.append(f"  {line.item:<34} {human(line.value, line.unit):>20}  {line.source}")
    verdict = "keeps" if fig["fits"] else "does NOT keep"
    radio_air = fig["channel_bit_rate_bps"]
    out.append(f"radio: {_bps(link.data_rate_bps)} of information"
               + (f", {_bps(radio_air)} on air" if radio_air != link.data_rate_bps else "")
               + (f", plus {link.packet_overhead_bits:g} bits of packet overhead per frame"
                  if link.packet_overhead_bits else "")
               + f"; margin at that rate {fig['margin_db']:.2f} dB: {verdict} the required "
               f"{link.required_margin_db:g} dB")
    if radio_air != link.data_rate_bps:
        out.append(f"  (data_rate_bps is read as information bits before FEC; if your radio is "
                   f"set to {_bps(link.data_rate_bps)} on air, write data_rate_bps = "
                   f"{link.data_rate_bps * fig['code_rate']:.6g}, that rate times the code "
                   f"rate {fig['code_rate']:.4g})")
    out.append(f"the margin would allow the radio up to {_bps(fig['max_data_rate_bps'])} of "
               f"information ({_bps(fig['max_data_rate_bps'] / fig['code_rate'])} on air); a "
               "stream is judged at the rate the radio is set to")
    if passing:
        out.append(f"overhead pass above {passing['min_elevation_deg']:g} deg: "
                   f"{human(passing['pass_duration_s'], 's')} of a "
                   f"{human(passing['orbital_period_s'], 's')} orbit (Earth rotation ignored)")
        out.append(f"  {'elevation deg':>13} {'range km':>10} {'path loss dB':>12} "
                   f"{'Eb/N0 dB':>9} {'margin dB':>10} {'t from zenith s':>15}")
        for r in passing["table"]:
            out.append(f"  {r['elevation_deg']:>13.1f} {r['slant_range_m'] / 1e3:>10.1f} "
                       f"{r['fspl_db']:>12.2f} {r['ebn0_db']:>9.2f} {r['margin_db']:>10.2f} "
                       f"{r['time_from_culmination_s']:>15.1f}")
        usable = passing["usable_duration_s"]
        text = (f"per pass at {_bps(passing['rate_bps'])}: {human(usable, 's')} with the "
                f"required margin, {human(passing['data_volume_bits'], 'bits')} of information "
                f"({passing['data_volume_bytes'] / 1e3:.1f} kB)")
        if "frames_per_pass" in passing:
            text += (f", {passing['frames_per_pass']} frames of "
                     f"{passing['bits_per_frame']:.0f} bits (mean at the best fidelity)")
        out.append(text)
        out.append(f"passes: {passing['passes_per_day']:.2f} a day "
                   f"({passing['passes_per_day_source']}); pass-averaged rate "
                   f"{_bps(passing['pass_averaged_rate_bps'])} of information "
                   f"({_bps(passing['pass_averaged_on_air_bps'])} on air); "
                   f"{passing['best_case_note']}")
    if rows is not None:
        rate_hz, rate_src = rate_info
        out.append(f"stream at each fidelity ({rate_hz:g} samples/s from {rate_src}; bit/s = "
                   f"coded bits / sample duration; fidelity held per "
                   f"{rows[0]['fidelity_scope'] if rows else 'frame'}; radio {_bps(radio_air)} "
                   "on air):")
        orbit = passing is not None
        out.append(f"  {'fidelity':>9} {'bit/s':>12} {'on air bit/s':>13} {'spare bit/s':>12} "
                   f"{'spare %':>8} {'margin dB':>9} {'SNR dB':>7}"
                   + (f" {'orbit/pass %':>12} {'stream per pass':>15}" if orbit else "")
                   + "  fits  limited by")
        for r in rows:
            out.append(
                f"  {r['fidelity']:>9g} {r['bits_per_second']:>12.6g} "
                f"{r['channel_bits_per_second']:>13.6g} {r['spare_on_air_bps']:>12.6g} "
                f"{r['spare_percent']:>8.2f} {r['margin_db']:>9.2f} {fmt(r['snr_db'], '.2f'):>7}"
                + (f" {fmt(r['pass_volume_used_percent'], '.1f'):>12} "
                   f"{human(r['stream_seconds_per_pass'], 's'):>15}" if orbit else "")
                + f"  {'yes' if r['fits'] else 'no ':<4}  {r['limited_by'] or '-'}")
        out.append("  (margin: at the radio's configured rate; spare: the radio's rate on air "
                   "left over; limited by: rate, margin or pass_volume, the first that fails"
                   + ("; orbit/pass %: bits on air of one orbital period over what the passes "
                      "of one period carry; stream per pass: stream time one pass carries "
                      "when stored and dumped" if orbit else "") + ")")
        if best:
            out.append(f"best fidelity that fits: {best['fidelity']:g} "
                       f"({_bps(best['channel_bits_per_second'])} on air of the radio's "
                       f"{_bps(radio_air)}, {best['spare_percent']:.1f} % spare; margin "
                       f"{best['margin_db']:.2f} dB of {link.required_margin_db:g} dB)")
        else:
            out.append(f"no fidelity in the list fits: {reason}")
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
                label=f"margin at the radio's {_bps(link.data_rate_bps)}")
        ax.set_xlabel("elevation (deg)")
        ax.set_title("margin over an overhead pass")
    else:
        rates = np.logspace(np.log10(link.data_rate_bps) - 2, np.log10(link.data_rate_bps) + 2,
                            200)
        ax.semilogx(rates, budget.margin_db(rates), label="margin")
        ax.axvline(link.data_rate_bps, color="grey", ls=":",
                   label=f"radio's rate ({_bps(link.data_rate_bps)})")
        ax.set_xlabel("information data rate (bit/s)")
        ax.set_title(f"margin at {human(budget.distance_m, 'm')}")
    ax.axhline(link.required_margin_db, color="red", ls="--", label="required margin")
    ax.set_ylabel("margin (dB)")
    ax.grid(True, alpha=0.3)
    ax.legend()
    if rows:
        ax = axes[0, 1]
        f = [r["fidelity"] for r in rows]
        ax.semilogy(range(len(f)), [r["channel_bits_per_second"] for r in rows], "o-",
                    label="stream on air")
        radio = budget.figures["channel_bit_rate_bps"]
        ax.axhline(radio, color="red", ls="--", label=f"radio's rate on air ({_bps(radio)})")
        if passing:
            avg = passing["pass_averaged_on_air_bps"]
            ax.axhline(avg, color="purple", ls="-.",
                       label=f"pass-averaged rate on air ({_bps(avg)}; best case)")
        bad = [i for i, r in enumerate(rows) if not r["fits"]]
        if bad:
            ax.plot(bad, [rows[i]["channel_bits_per_second"] for i in bad], "x", color="black",
                    ms=10, label="does not fit (limited by)")
        for i in bad:
            ax.annotate(rows[i]["limited_by"], (i, rows[i]["channel_bits_per_second"]),
                        textcoords="offset points", xytext=(6, -12), fontsize=8)
        ax.set_xticks(range(len(f)), [f"{v:g}" for v in f])
        ax.set_xlabel("fidelity (energy fraction kept)")
        ax.set_ylabel("bits on air per second (bit/s)")
        ax.set_title("stream against the radio's configured rate")
        ax.grid(True, alpha=0.3, which="both")
        ax.legend(fontsize=8, loc="lower right")
    fig.tight_layout()
    with atomic_output(path) as tmp:
        fig.savefig(tmp, format=Path(path).suffix.lower().lstrip("."), dpi=110)
    plt.close(fig)
