"""``coefwire simulate``: send a coded sample file across a simulated noisy link."""

from __future__ import annotations

import argparse
import math
from dataclasses import replace
from pathlib import Path

from codec import (
    InputError,
    Progress,
    as_samples,
    channel_table,
    encode,
    pooled_label,
    read_samples,
    with_unit,
)
from codec.cli.common import add_profile_options, fmt, resolve_profile, write_json

from ._channels import MODULATIONS
from ._fec import fec_names
from ._receiver import CONCEAL_POLICIES
from ._simulate import ChannelConfig, channel_kinds, plot_sweep, simulate, zero_error_bound

__all__ = ["register"]

_CAUTION = ("caution: simulated figures only; transmit power, frequencies and emissions are "
            "regulated - defer to local regulations and licensed practice before putting a link "
            "on air, and do not rely on lossy coding for signals on which safety depends.")


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "simulate", help="send a coded sample file across a simulated noisy link",
        description="Encode INPUT, protect the stream with an FEC, pass it through a channel "
        "model and report what the receiver reconstructs (mean and 95 % interval over trials).")
    p.add_argument("input", metavar="INPUT")
    add_profile_options(p)
    p.add_argument("--channel", choices=channel_kinds(), default="awgn")
    p.add_argument("--ber", type=float, metavar="X",
                   help="bit error rate (bsc), or the good-state rate (burst; default 0)")
    p.add_argument("--ebn0", metavar="DB",
                   help="Eb/N0 per codec bit in dB for awgn, or a sweep START:STOP:STEP")
    p.add_argument("--modulation", choices=MODULATIONS, default="bpsk")
    p.add_argument("--fec", choices=fec_names(), default="none")
    p.add_argument("--interleave", type=int, default=1, metavar="I",
                   help="RS(255,223) interleaving depth, 1-8 (default 1)")
    p.add_argument("--conceal", choices=CONCEAL_POLICIES, default="hold",
                   help="how lost spans are filled (default hold)")
    p.add_argument("--loss-rate", type=float, default=None, metavar="P",
                   help="probability that a whole frame never arrives (erasure; any channel)")
    p.add_argument("--burst-length", type=float, default=20.0, metavar="BITS",
                   help="burst channel: mean stay in the bad state (default 20 bits)")
    p.add_argument("--bad-fraction", type=float, default=0.01, metavar="F",
                   help="burst channel: long-run share of bits in the bad state (default 0.01)")
    p.add_argument("--ber-bad", type=float, default=0.5, metavar="X",
                   help="burst channel: error rate in the bad state (default 0.5)")
    p.add_argument("--trials", type=int, default=1, metavar="K")
    p.add_argument("--seed", type=int, default=0, metavar="S")
    p.add_argument("--json", metavar="OUT", help="write the JSON report here")
    p.add_argument("--plot", metavar="OUT.png", help="plot error rates and SNR against Eb/N0")
    p.set_defaults(handler=_simulate)


def _ebn0_list(text: str | None) -> list[float]:
    if text is None:
        return [6.0]
    try:
        parts = [float(v) for v in text.split(":")]
    except ValueError:
        raise InputError("give --ebn0 as a number of dB or START:STOP:STEP", "--ebn0") from None
    if len(parts) == 1:
        return parts
    if len(parts) != 3 or parts[2] <= 0 or parts[1] < parts[0]:
        raise InputError("a sweep is START:STOP:STEP with STOP >= START and STEP > 0", "--ebn0")
    start, stop, step = parts
    count = int(math.floor((stop - start) / step + 1e-9)) + 1
    return [round(start + i * step, 10) for i in range(count)]


def _config(args) -> ChannelConfig:
    def prob(v, name):
        if v is not None and not 0.0 <= v <= 1.0:
            raise InputError("a probability must lie between 0 and 1", name)

    prob(args.ber, "--ber")
    prob(args.loss_rate, "--loss-rate")
    prob(args.ber_bad, "--ber-bad")
    if args.channel == "bsc" and args.ber is None:
        raise InputError("the bsc channel needs --ber X", "--channel bsc")
    if args.channel == "erasure" and args.loss_rate is None:
        raise InputError("the erasure channel needs --loss-rate P", "--channel erasure")
    if args.channel in ("awgn", "erasure") and args.ber is not None:
        raise InputError("--ber applies to the bsc and burst channels only", "--ber")
    if args.channel != "awgn" and args.ebn0 is not None:
        raise InputError("--ebn0 applies to the awgn channel only", "--ebn0")
    if args.channel == "burst" and (args.burst_length < 1 or not 0 < args.bad_fraction < 1):
        raise InputError("the burst channel needs --burst-length >= 1 and 0 < --bad-fraction < 1",
                         "--channel burst")
    if not 1 <= args.interleave <= 8:
        raise InputError("the interleaving depth must be 1 to 8 (CCSDS)", "--interleave")
    if args.trials < 1:
        raise InputError("give at least one trial", "--trials")
    return ChannelConfig(kind=args.channel, ber=args.ber or 0.0, modulation=args.modulation,
                         burst_length_bits=args.burst_length, bad_fraction=args.bad_fraction,
                         ber_bad=args.ber_bad, loss_rate=args.loss_rate or 0.0)


def _interval(r: dict, key: str, spec: str) -> str:
    ci = r.get(f"{key}_ci95")
    base = fmt(r.get(key), spec)
    return base if not ci else f"{base} [{format(ci[0], spec)}, {format(ci[1], spec)}]"


def _rate(value, counted, spec: str = ".3e") -> str:
    """A measured rate, or '<bound' when it saw no event (as the plot draws it)."""
    if value == 0:
        return f"<{float(zero_error_bound(max(counted, 1))):.2e}"
    return fmt(value, spec)


def _print_row(r: dict) -> None:
    units = r.get("units", {})
    one = next(iter(units.values()), None) if len(set(units.values())) == 1 else None
    head = f"Eb/N0 {r['ebn0_db']:.2f} dB: " if r["ebn0_db"] is not None else ""
    theory = (f" (theory {r['ber_channel_theory']:.3e})" if r.get("ber_channel_theory")
              is not None else "")
    print(f"{head}channel BER {_interval(r, 'ber_channel', '.3e')}{theory}, "
          f"post-FEC BER {_interval(r, 'ber_post_fec', '.3e')}")
    print(f"  frames: sent {r['frames_sent']:.0f}, delivered {r['frames_delivered']:.1f}, "
          f"dropped by CRC {r['frames_dropped_crc']:.1f}, erased {r['frames_erased']:.1f}, "
          f"undetected errors {r['frames_undetected_errors']:.1f}, "
          f"rejected header {r['frames_rejected_header']:.1f}, "
          f"out of range {r['frames_out_of_range']:.1f}")
    print(f"  samples: delivered {r['samples_delivered']:.1f}, concealed "
          f"{r['samples_concealed']:.1f}, lost {r['samples_lost']:.1f} of {r['samples_in']:.0f}")
    print(f"  {pooled_label(units)}: SNR delivered {_interval(r, 'snr_db_delivered', '.2f')} dB, "
          f"end to end {_interval(r, 'snr_db_end_to_end', '.2f')} dB; max abs error delivered "
          f"{with_unit(r['max_abs_error_delivered'], one)}, end to end "
          f"{with_unit(r['max_abs_error_end_to_end'], one)}; fidelity delivered "
          f"{fmt(r['fidelity_delivered'], '.5f')}, end to end "
          f"{fmt(r['fidelity_end_to_end'], '.5f')}")
    print(f"  end-to-end fidelity counts {r['fidelity_end_to_end_counts']}")
    per = {n: {**f, "bits_per_sample": f.get("bits_codec_per_sample", math.nan)}
           for n, f in r["per_channel_end_to_end"].items()}
    lines = channel_table(per, units, "fidelity_end_to_end", "fidelity e2e")
    print("  per channel, end to end (bits/sample: the channel's codec bits; FEC and sync "
          "are pooled in the bits on air above):")
    print("\n".join("  " + ln + (f" {'lost':>8}" if i == 0 else
                                  f" {per[ln.split()[0]]['samples_lost']:>8.1f}")
                     for i, ln in enumerate(lines)))


def _simulate(args) -> int:
    cfg = _config(args)
    if args.plot and args.channel != "awgn":
        raise InputError("--plot draws curves against Eb/N0; use it with --channel awgn", "--plot")
    table = read_samples(args.input)
    profile = resolve_profile(args, table.names)
    points = _ebn0_list(args.ebn0) if args.channel == "awgn" else [None]
    bar = Progress(len(points) * args.trials, "simulating", "trial")
    kw = {"fec": args.fec, "interleave": args.interleave, "trials": args.trials,
          "policy": args.conceal, "on_trial": bar.update}
    # As link_sim.sweep: one encode, then each Eb/N0 point with its own seed.
    enc = encode(as_samples(table.values), profile)
    with bar:
        rows = [simulate(table.values, profile,
                         cfg if e is None else replace(cfg, ebn0_db=float(e)),
                         seed=args.seed + i, enc=enc, **kw) for i, e in enumerate(points)]
    r0 = rows[0]
    print(f"{args.channel} channel, FEC {args.fec}: bits on air {r0['bits_on_air_per_frame']:.1f} "
          f"per frame, {r0['bits_on_air_per_sample']:.3f} per sample (codec "
          f"{r0['bits_codec_per_frame']:.1f} and {r0['bits_codec_per_sample']:.3f}; FEC, padding "
          f"and sync add {r0['bits_fec_overhead']:.0f} bits in all); codec alone SNR "
          f"{fmt(r0['snr_db_codec_only'], '.2f')} dB; {args.trials} trial(s), seed {args.seed}")
    for r in rows:
        _print_row(r)
    if len(rows) > 1:
        print(f"{'Eb/N0 dB':>9} {'BER ch':>10} {'BER FEC':>10} {'FER':>10} {'SNR e2e dB':>11}")
        for r in rows:
            k = r["trials"]
            print(f"{r['ebn0_db']:9.2f} {_rate(r['ber_channel'], r['bits_on_air'] * k):>10} "
                  f"{_rate(r['ber_post_fec'], r['bits_codec'] * k):>10} "
                  f"{_rate(r['frame_error_rate'], r['frames_sent'] * k, '.4f'):>10} "
                  f"{fmt(r['snr_db_end_to_end'], '11.2f')}")
        print("  (<x: no error in any trial; x is the 95 % upper bound 1 - 0.05^(1/n) over the n "
              "bits or frames sent, about 3/n, the rule of three; the plot draws the same)")
    if args.json:
        write_json(args.json, rows if len(rows) > 1 else rows[0])  # a sweep: list of rows
    if args.plot:
        plot_sweep(rows, args.plot, f"profile {Path(args.profile).name}" if args.profile
                   else "built-in default profile")
    print(_CAUTION)
    return 0
