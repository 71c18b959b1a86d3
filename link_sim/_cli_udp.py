"""``coefwire send`` and ``coefwire receive``: a coded stream over UDP datagrams.

Registered through the ``coefwire.commands`` entry-point group (pyproject.toml).
"""

from __future__ import annotations

import contextlib
import sys
from pathlib import Path

from codec import InputError, StreamDecoder
from codec._io import atomic_output, is_stdio, write_csv_block
from codec._profile import load_stream_note
from codec.cli._common import write_json

from ._udp import (
    SEND_COUNTED,
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
                       description="Listen on HOST:PORT, decode frames as they arrive and write "
                       "samples to OUTPUT (.csv; - for standard output) as windows complete. "
                       "Stops when the stream's known end is reached, after --duration seconds, "
                       "or --idle seconds after the last datagram.")
    p.add_argument("--udp", required=True, metavar="HOST:PORT")
    p.add_argument("-p", "--profile", required=True, metavar="PROFILE",
                   help="the stream's profile (STREAM.profile.toml also gives its length)")
    p.add_argument("-o", "--output", required=True, metavar="OUTPUT")
    p.add_argument("--duration", type=float, metavar="S", help="stop after S seconds")
    p.add_argument("--idle", type=float, default=5.0, metavar="S",
                   help="stop S seconds after the last datagram (default 5)")
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
    report = {"frames": stats.frames, "bits": 8 * stats.bytes, "seconds": stats.seconds,
              "rate_bps": stats.rate_bps, "average_bps": stats.average_bps,
              "rate_error_percent": stats.rate_error_percent, "counted": SEND_COUNTED}
    write_json(args.json, report)
    line = (f"{stats.frames} frames ({8 * stats.bytes} bits) sent to {host}:{port} in "
            f"{stats.seconds:.3f} s: average {stats.average_bps:.0f} bit/s")
    if stats.rate_bps:
        line += (f", {stats.rate_error_percent:+.2f} % from the asked {stats.rate_bps:g} bit/s")
    print(line)
    print(SEND_COUNTED)
    print(_CAUTION)
    return 0


def _receive(args) -> int:
    host, port = parse_endpoint(args.udp)
    profile, note = load_stream_note(args.profile)
    if not profile.channels:
        raise InputError("the profile lists no channels; use the one recorded beside the stream",
                         args.profile)
    if not is_stdio(args.output) and Path(args.output).suffix.lower() != ".csv":
        raise InputError("receive writes CSV as samples arrive; name a .csv file or -",
                         args.output)
    names = [c.name for c in profile.channels]
    decoder = StreamDecoder(profile, samples=note.samples if note else None)
    info = sys.stderr if is_stdio(args.output) else sys.stdout
    with contextlib.ExitStack() as stack:
        if is_stdio(args.output):
            sink = sys.stdout
        else:
            tmp = stack.enter_context(atomic_output(args.output))
            sink = stack.enter_context(open(tmp, "w", encoding="utf-8", newline=""))
        sink.write(",".join(names) + "\n")

        def on_block(block) -> None:
            write_csv_block(sink, block.samples)
            sink.flush()

        counts = receive_frames(decoder, host, port, on_block, args.duration, args.idle)
    counts["channels"] = len(names)
    counts["events"] = decoder.events
    write_json(args.json, counts)
    print(f"{counts['datagrams']} datagrams, {counts['frames_ok'] + counts['gap_frames_ok']} "
          f"frames decoded in "
          f"{counts['seconds']:.2f} s -> {counts['samples']} samples x {len(names)} channels: "
          f"{counts['samples_delivered']} delivered, {counts['samples_lost']} lost, "
          f"{counts['samples_gap']} gap" + ("" if counts["end_known"] else
                                            "; the stream's end is not known"), file=info)
    return 0
