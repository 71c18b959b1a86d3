"""``coefwire send`` and ``coefwire receive``: a coded stream over UDP datagrams.

Registered through the ``coefwire.commands`` entry-point group (pyproject.toml).
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
import threading
from pathlib import Path

import numpy as np

from codec import (
    DELIVERED,
    MAX_FILL_WINDOWS,
    STATUS_NAMES,
    InputError,
    StreamDecoder,
    is_stdio,
    load_stream_note,
    receive_report,
    units_of,
    with_unit,
    write_csv_block,
)
from codec.cli.common import check_paths, write_json

from ._udp import (
    SEND_COUNTED,
    UdpReception,
    parse_endpoint,
    receive_frames,
    send_frames,
    split_frames_of,
)

__all__ = ["register_send", "register_receive"]

_CAUTION = ("caution: transmit only on frequencies and at powers your licence or local "
            "regulations allow; UDP here stands in for the radio link.")


def register_send(sub) -> None:
    p = sub.add_parser("send", help="send a coded stream as UDP datagrams, one frame each",
                       description="Send the frames of STREAM (made by 'coefwire encode') to "
                       "HOST:PORT, one per datagram, paced at the link rate.")
    p.add_argument("stream", metavar="INPUT")
    p.add_argument("--udp", required=True, metavar="HOST:PORT")
    p.add_argument("--rate-bps", type=float, metavar="R",
                   help="link rate in bits per second of frames (default: as fast as possible)")
    p.add_argument("--json", metavar="REPORT", help="write what was sent and counted here")
    p.set_defaults(handler=_send)


def register_receive(sub) -> None:
    p = sub.add_parser("receive", help="decode frames arriving as UDP datagrams",
                       description="Listen on HOST:PORT (port 0: a free port, printed on "
                       "standard error once bound), decode frames as they arrive and write "
                       "samples to OUTPUT (.csv; - for standard output) as windows complete, "
                       "flushed, so OUTPUT can be read while it runs. Stops when the stream's "
                       "known end is reached, after --duration seconds, after --idle seconds "
                       "waiting with no datagram, or on SIGINT (Ctrl-C) or SIGTERM; datagrams "
                       "already waiting are still read, and OUTPUT and the JSON report are "
                       "finished with what arrived (also when an error stops it).")
    p.add_argument("--udp", required=True, metavar="HOST:PORT")
    p.add_argument("-p", "--profile", required=True, metavar="PROFILE",
                   help="the stream's profile (STREAM.profile.toml also gives its length)")
    p.add_argument("-o", "--output", required=True, metavar="OUTPUT")
    p.add_argument("--duration", type=float, metavar="S", help="stop after S seconds")
    p.add_argument("--idle", type=float, default=5.0, metavar="S",
                   help="stop after S seconds of waiting with no datagram, once one has "
                   "arrived (default 5; time spent decoding does not count)")
    p.add_argument("--max-fill", type=int, default=MAX_FILL_WINDOWS, metavar="W",
                   help="with the stream's end unknown, the most lost windows one sequence jump "
                   f"may add to the output; the rest is cut as a discontinuity (default "
                   f"{MAX_FILL_WINDOWS})")
    p.add_argument("--json", metavar="REPORT")
    p.set_defaults(handler=_receive)


def _send(args) -> int:
    host, port = parse_endpoint(args.udp)
    try:
        data = Path(args.stream).read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read the stream ({exc.strerror})", args.stream) from None
    frames = split_frames_of(data)
    if not frames:
        raise InputError("no frame with a valid sync marker and CRC; is this a coefwire stream?",
                         args.stream)
    stats = send_frames(frames, host, port, args.rate_bps)
    write_json(args.json, stats.report())
    line = (f"{stats.frames} frames ({8 * stats.bytes} bits) sent to {host}:{port} in "
            f"{stats.seconds:.3f} s: average {stats.average_bps:.0f} bit/s")
    if stats.rate_bps:
        line += (f", {stats.rate_error_percent:+.2f} % from the asked {stats.rate_bps:g} bit/s")
    print(line)
    print(SEND_COUNTED)
    print(_CAUTION)
    return 0


def _receive(args) -> int:
    host, port = parse_endpoint(args.udp, allow_any_port=True)
    check_paths({"profile": args.profile}, {"output": args.output, "--json report": args.json})
    profile, note = load_stream_note(args.profile)
    if not profile.channels:
        raise InputError("the profile lists no channels; use the one recorded beside the stream",
                         args.profile)
    if not is_stdio(args.output) and Path(args.output).suffix.lower() != ".csv":
        raise InputError("receive writes CSV as samples arrive; name a .csv file or -",
                         args.output)
    check_paths({"basis file": profile.basis_file}, {"output": args.output})
    for out in (args.output, args.json):  # before listening: an unwritable path fails now
        if out is not None and not is_stdio(out):
            _check_output(Path(out))
    names = [c.name for c in profile.channels]
    if args.max_fill < 0:
        raise InputError("--max-fill must be 0 or more windows", "command line")
    decoder = StreamDecoder(profile, samples=note.samples if note else None,
                            max_fill=args.max_fill)
    info = sys.stderr if is_stdio(args.output) else sys.stdout
    tally = ChannelTally(len(names))
    signals: list[str] = []
    with contextlib.ExitStack() as stack:
        if threading.current_thread() is threading.main_thread():
            # a signal only sets a flag: the loop stops between datagrams, never inside
            # a decode, and the output and the report are finished with what arrived
            for sig in (signal.SIGINT, signal.SIGTERM):
                old = signal.signal(sig, lambda num, _frame: signals.append(
                    signal.Signals(num).name))
                stack.callback(signal.signal, sig, old)
        sink = sys.stdout if is_stdio(args.output) else None

        def ready(bound: int) -> None:
            nonlocal sink
            if sink is None:  # written in place, not renamed at the end: readable while it runs
                sink = stack.enter_context(open(args.output, "w", encoding="utf-8",
                                                newline=""))
            sink.write(",".join(names) + "\n")
            sink.flush()
            print(f"listening on {host}:{bound}", file=sys.stderr, flush=True)

        def on_block(block) -> None:
            write_csv_block(sink, block.samples)
            sink.flush()
            tally.add(block.samples, block.status)

        def on_finish(got: UdpReception) -> None:
            if sink is not None:
                sink.flush()
            # the per-channel ranges are in the channels' units (the JSON ``units`` map)
            write_json(args.json, receive_report(got.counts, len(names), decoder.events,
                                                 got.datagrams, got.seconds, got.stopped,
                                                 tally.per_channel(names), units_of(profile)))

        got = receive_frames(decoder, host, port, on_block, args.duration, args.idle,
                                ready=ready, stop=lambda: signals[0] if signals else None,
                                on_finish=on_finish)
    counts = got.counts
    print(f"{got.datagrams} datagrams, {counts.frames_ok + counts.gap_frames_ok} "
          f"frames decoded in "
          f"{got.seconds:.2f} s -> {counts.samples} samples x {len(names)} channels; "
          f"counted over all {len(names)} channels: "
          f"{counts.samples_delivered} delivered, {counts.samples_lost} lost, "
          f"{counts.samples_gap} gap" + ("" if counts.end_known else
                                         "; the stream's end is not known")
          + f"; stopped: {got.stopped}", file=info)
    print("\n".join(channel_count_lines(tally.per_channel(names), units_of(profile))), file=info)
    return 0


class ChannelTally:
    """Per channel: samples of each status and the range of the delivered values."""

    def __init__(self, channels: int):
        self.counts = np.zeros((len(STATUS_NAMES), channels), np.int64)
        self.low = np.full(channels, np.inf)
        self.high = np.full(channels, -np.inf)

    def add(self, samples: np.ndarray, status: np.ndarray) -> None:
        """Count one released block (samples x channels, with the decoder's status codes)."""
        if not status.size:
            return
        codes = np.fromiter(STATUS_NAMES, np.int64)
        self.counts += (status[None] == codes[:, None, None]).sum(axis=1)
        got = status == DELIVERED
        self.low = np.minimum(self.low, np.where(got, samples, np.inf).min(axis=0))
        self.high = np.maximum(self.high, np.where(got, samples, -np.inf).max(axis=0))

    def per_channel(self, names: list[str]) -> dict:
        """The JSON ``per_channel`` map: counts per status, delivered min/max (None if none)."""
        out = {}
        for c, name in enumerate(names):
            row = {f"samples_{v}": int(self.counts[i, c])
                   for i, v in enumerate(STATUS_NAMES.values())}
            seen = bool(np.isfinite(self.low[c]))
            row["delivered_min"] = float(self.low[c]) if seen else None
            row["delivered_max"] = float(self.high[c]) if seen else None
            out[name] = row
        return out


def channel_count_lines(per_channel: dict, units: dict) -> list[str]:
    """Per channel: unit, samples delivered, lost and gap, range of the delivered values."""
    width = max([7] + [len(n) for n in per_channel])
    uw = max([4] + [len(u or "-") for u in units.values()])
    lines = [f"{'channel':<{width}} {'unit':<{uw}} {'delivered':>10} {'lost':>10} {'gap':>10} "
             f"{'delivered min':>16} {'delivered max':>16}"]
    for name, f in per_channel.items():
        u = units.get(name)
        lines.append(f"{name:<{width}} {u or '-':<{uw}} {f['samples_delivered']:>10} "
                     f"{f['samples_lost']:>10} {f['samples_gap']:>10} "
                     f"{with_unit(f['delivered_min'], u):>16} "
                     f"{with_unit(f['delivered_max'], u):>16}")
    return lines


def _check_output(path: Path) -> None:
    """The checks an atomic output makes, for a file written in place as samples arrive."""
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise InputError("the output folder does not exist; create it first", str(path))
    if path.exists() and not path.is_file():
        raise InputError("the output is a folder or a device; name a file", str(path))
    if not os.access(folder, os.W_OK) or (path.exists() and not os.access(path, os.W_OK)):
        raise InputError("cannot write the output there (permission denied); choose a folder "
                         "you may write to", str(path))
