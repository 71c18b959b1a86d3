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

from ._udp import parse_endpoint, receive_frames, send_frames, split_frames_of

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
                   help="link rate in bits per second (default: as fast as possible)")
    p.set_defaults(handler=_send)


def register_receive(sub) -> None:
    p = sub.add_parser("receive", help="decode frames arriving as UDP datagrams",
                       description="Listen on HOST:PORT, decode frames as they arrive and write "
                       "samples to OUTPUT (.csv; - for standard output) as windows complete. "
                       "Stops when the stream's known end is reached, after --duration seconds, "
                       "or --idle seconds after the last datagram.")
    p.add_argument("--udp", required=True, metavar="HOST:PORT",
                   help="where to listen (port 0: a free port, printed once bound)")
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
    print(f"{stats.frames} frames ({8 * stats.bytes} bits) sent to {host}:{port} in "
          f"{stats.seconds:.3f} s ({8 * stats.bytes / max(stats.seconds, 1e-9):.0f} bit/s)")
    print(_CAUTION)
    return 0


def _receive(args) -> int:
    host, port = parse_endpoint(args.udp, any_port=True)
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

        def ready(bound: int) -> None:  # port 0 picks a free port: say which one
            print(f"listening on {host}:{bound}", file=info, flush=True)

        counts = receive_frames(decoder, host, port, on_block, args.duration, args.idle,
                                ready=ready)
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
