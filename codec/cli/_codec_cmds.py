"""``encode``, ``decode``, ``roundtrip`` and ``inspect``."""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
from pathlib import Path

import numpy as np

from .._errors import FrameError, InputError
from .._io import (
    CsvBlockReader,
    SampleTable,
    atomic_output,
    csv_decimals,
    is_stdio,
    read_samples,
    sample_suffix,
    write_csv_block,
    write_samples,
)
from .._profile import (
    Profile,
    StreamNote,
    check_channel_names,
    check_note_fits,
    load_profile,
    load_stream_note,
    note_path,
    save_stream_note,
)
from .._progress import busy
from .._timecol import describe_time, time_fields, time_values
from ..encoder import encode, frame_key
from ..layouts.gapmask import GAP_POLICIES
from ..quantize.select import check_magnitude
from ..report import (
    channel_table,
    encode_command_report,
    pooled_label,
    roundtrip_figures,
    time_column_report,
    with_unit,
)
from ..stream.chunks import ChunkDecoder
from ..stream.decode import check_some_frame, decode
from ..stream.listing import list_frames
from ..stream.live import MAX_FILL_WINDOWS, StreamDecoder, StreamEncoder
from ..stream.search import locate_frames
from ..stream.stuffing import SNIFF_BYTES, STUFFINGS, Unstuffer, detect_stuffing, stuff
from ..transform.bases import basis_names
from .common import (
    add_profile_options,
    check_paths,
    fmt,
    json_text,
    resolve_profile,
    write_json,
)

__all__ = ["register", "roundtrip_report", "decode_report", "write_stream"]

_CAUTION = ("caution: lossy coding; do not use it for signals on which safety depends "
            "unless the fidelity has been justified for that use.")


def register(sub: argparse._SubParsersAction) -> None:
    names = ", ".join(basis_names())
    p = sub.add_parser("encode", help="code a sample file into a stream of frames",
                       description=f"Code INPUT (.csv or .npy; - reads CSV from standard input "
                       f"and codes it as it arrives) into STREAM (- writes to standard output). "
                       f"Bases: {names}.")
    p.add_argument("input", metavar="INPUT")
    p.add_argument("-o", "--output", required=True, metavar="STREAM")
    add_profile_options(p)
    p.add_argument("--json", metavar="REPORT", help="write the JSON report here")
    _add_stream_options(p)
    p.add_argument("--gaps", choices=GAP_POLICIES, default="refuse",
                   help="NaN samples: refuse (default), fill by linear interpolation, or mark "
                   "them so the receiver reproduces them as NaN")
    p.set_defaults(handler=_encode)

    p = sub.add_parser("decode", help="decode a stream back into samples",
                       description="Decode STREAM into OUTPUT (.csv or .npy). Without -p the "
                       "profile recorded beside the stream (STREAM.profile.toml) is used. "
                       "STREAM - reads standard input as it arrives (give -p); OUTPUT - writes "
                       "CSV to standard output as samples are released. Damaged, foreign and "
                       "missing frames are counted in the report, never fatal.")
    p.add_argument("stream", metavar="STREAM")
    p.add_argument("-o", "--output", required=True, metavar="OUTPUT")
    p.add_argument("-p", "--profile", metavar="PROFILE")
    p.add_argument("--json", metavar="REPORT")
    _add_stream_options(p)
    p.add_argument("--reorder", type=int, default=16, metavar="W",
                   help="time windows a frame may arrive late and still be placed (default 16)")
    p.add_argument("--max-fill", type=int, default=MAX_FILL_WINDOWS, metavar="W",
                   help="with the stream's end unknown, the most lost windows one sequence jump "
                   f"may add to the output; the rest is cut as a discontinuity (default "
                   f"{MAX_FILL_WINDOWS})")
    p.set_defaults(handler=_decode)

    p = sub.add_parser("roundtrip", help="encode, decode and check every frame meets the target",
                       description="Exit 0 when every frame meets the target, 1 when any "
                       "misses, 2 on a usage or data error.")
    p.add_argument("input", metavar="INPUT")
    add_profile_options(p)
    p.add_argument("--json", metavar="REPORT")
    p.set_defaults(handler=_roundtrip)

    p = sub.add_parser("inspect", help="list every frame of a stream",
                       description="One line per frame: byte offset, kind (layout version or "
                       "gap mask), sequence, channels, basis, kept terms, quantizer step (the "
                       "coarsest, for a frame of several windows), bits and CRC status. A "
                       "stuffed stream (SLIP or COBS, recorded in the stream's note or given "
                       "with --stuffing) is unstuffed first; its offsets are then those of the "
                       "unstuffed frames.")
    p.add_argument("stream", metavar="STREAM")
    p.add_argument("-p", "--profile", metavar="PROFILE")
    _add_stream_options(p)
    p.set_defaults(handler=_inspect)


def _add_stream_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--stuffing", choices=("none",) + STUFFINGS, default=None,
                   help="byte-stream framing for serial modems: SLIP (RFC 1055) or COBS "
                   "(Cheshire & Baker 1999), one frame per packet (encode: default none, "
                   "recorded in the stream's note; decode: default the note's)")


def _read_stream(path: str) -> bytes:
    try:
        return Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError("no such stream file; check the path", path) from None
    except OSError as exc:
        raise InputError(f"cannot read the stream ({exc.strerror})", path) from None


def _stream_profile(args) -> tuple[Profile, StreamNote | None]:
    note = note_path(args.stream)
    if args.profile:
        profile = load_profile(args.profile)
        extra = load_stream_note(note)[1] if note.is_file() else None
        return profile, extra
    if not note.is_file():
        raise InputError(f"no profile given and none recorded at {note}; pass -p PROFILE",
                         args.stream)
    return load_stream_note(note)


def write_stream(path: str | Path, table: SampleTable, profile: Profile, gaps: str = "refuse",
                 stuffing: str = "none", json_path: str | Path | None = None,
                 json_report=None):
    """Encode ``table`` and write the stream plus its recorded profile, atomically together.

    ``path`` ``-`` writes the stream to standard output (no profile file then).
    With ``json_path``, ``json_report(result)`` is written there in the same
    commit: when any of the files cannot be written, none is.
    """
    result = encode(table.values, profile, gaps=gaps)
    data = _stuff(result.data, stuffing)
    note = _note_for(table)
    if stuffing != "none":
        note = note.model_copy(update={"stuffing": stuffing})
    with contextlib.ExitStack() as stack:
        # every temporary file is made (so every folder is checked) before any is renamed
        tmp_json = stack.enter_context(atomic_output(json_path)) if json_path else None
        if is_stdio(path):
            tmp_stream = tmp_note = None
        else:
            tmp_stream = stack.enter_context(atomic_output(path))
            tmp_note = stack.enter_context(atomic_output(note_path(path)))
        if tmp_json is not None:
            tmp_json.write_text(json_text(json_report(result)), encoding="utf-8")
        if tmp_stream is None:
            sys.stdout.buffer.write(data)
            sys.stdout.buffer.flush()
            return result
        tmp_stream.write_bytes(data)
        save_stream_note(result.profile, note, tmp_note)
    return result


def _encode(args) -> int:
    if is_stdio(args.input):
        return _encode_live(args)
    _check_encode_paths(args)
    table = read_samples(args.input, allow_gaps=args.gaps != "refuse")
    # what the stream's own profile could not hold or the quantizer code, named by file
    check_channel_names(table.names, args.input)
    check_magnitude(table.values, table.names, args.input)
    profile = resolve_profile(args, table.names)
    stuffing = args.stuffing or "none"
    with busy(f"encoding {table.values.shape[0]} samples x {table.values.shape[1]} channels"):
        tf = time_fields(table.time) if table.time is not None else {}
        time_column = time_column_report(table.time_name, tf)
        result = write_stream(args.output, table, profile, args.gaps, stuffing, args.json,
                              lambda r: encode_command_report(r, time_column))
    out = sys.stderr if is_stdio(args.output) else sys.stdout
    r = result.report
    print(f"{r['frames']} frames, {r['samples']} samples x {r['channels']} channels -> "
          f"{r['bits_total']} bits ({r['bits_per_sample']:.3f} bits/sample, "
          f"ratio {fmt(r['compression_ratio'], '.2f')}); fidelity min "
          f"{fmt(r['fidelity_min'], '.5f')} (target {r['fidelity_target']} per "
          f"{r['fidelity_scope']})", file=out)
    print_channel_figures(r, out)
    if tf:
        print(describe_time(tf, table.time_name), file=out)
    if r.get("samples_gap"):
        print(f"{r['samples_gap']} missing samples "
              f"{'filled by linear interpolation' if args.gaps == 'fill' else 'marked as gaps'}",
              file=out)
    print(_CAUTION, file=out)
    return 0


def channel_figure_lines(r: dict) -> list[str]:
    """The per-channel table and the pooled figures, labelled as pooled (a report's lines)."""
    units = r.get("units", {})
    one = next(iter(units.values()), None) if len(set(units.values())) == 1 else None
    return channel_table(r["per_channel"], units) + [
        f"{pooled_label(units)}: SNR {fmt(r['snr_db'], '.2f')} dB, PRD "
        f"{fmt(r['prd_percent'], '.3f')} %, max abs error {with_unit(r['max_abs_error'], one)}"]


def print_channel_figures(r: dict, out=None) -> None:
    """Print :func:`channel_figure_lines` (standard output by default)."""
    print("\n".join(channel_figure_lines(r)), file=out or sys.stdout)


def _check_encode_paths(args, profile: Profile | None = None) -> None:
    """No output of ``encode`` may name one of its inputs (or another output)."""
    check_paths({"input": args.input, "profile": args.profile,
                 "basis file": profile.basis_file if profile else None},
                {"output": args.output,
                 "recorded profile": None if is_stdio(args.output) else note_path(args.output),
                 "--json report": args.json})


def _stuff(data: bytes, stuffing: str) -> bytes:
    """Wrap each frame of a clean stream in a SLIP or COBS packet."""
    if stuffing == "none":
        return data
    return stuff(locate_frames(data).frames, stuffing)


def _encode_live(args) -> int:
    """Code CSV from standard input block by block, writing frames as windows complete."""
    reader = CsvBlockReader(sys.stdin.buffer)
    to_stdout = is_stdio(args.output)
    info = sys.stderr if to_stdout else sys.stdout
    _check_encode_paths(args)
    enc = None
    with contextlib.ExitStack() as stack:
        if to_stdout:
            sink = sys.stdout.buffer
        else:
            tmp = stack.enter_context(atomic_output(args.output))
            sink = stack.enter_context(open(tmp, "wb"))
        for values, _time in reader.blocks():
            if enc is None:
                profile = resolve_profile(args, reader.names)
                _check_encode_paths(args, profile)
                enc = StreamEncoder(profile, len(reader.names), gaps=args.gaps)
            sink.write(_stuff(enc.feed(values), args.stuffing or "none"))
            sink.flush()
        if enc is None:
            raise InputError("no data rows arrived under the header", "standard input")
        sink.write(_stuff(enc.close(), args.stuffing or "none"))
        sink.flush()
        if not to_stdout:
            tmp_note = stack.enter_context(atomic_output(note_path(args.output)))
            save_stream_note(enc.profile, StreamNote(
                samples=enc.samples,
                stuffing=None if args.stuffing in (None, "none") else args.stuffing), tmp_note)
    print(f"{enc.window} windows, {enc.samples} samples x {len(reader.names)} channels -> "
          f"{8 * enc.bytes_out} bits ({8 * enc.bytes_out / (enc.samples * len(reader.names)):.3f}"
          " bits/sample)", file=info)
    if to_stdout:
        print("note: no STREAM.profile.toml is written for standard output; decode with -p "
              "PROFILE (the stream's end is then known only from a short last frame)", file=info)
    print(_CAUTION, file=info)
    return 0


def _note_for(table: SampleTable) -> StreamNote:
    """The stream note: the sample count and, when the input has one, its time column exactly."""
    fields = time_fields(table.time) if table.time is not None else {}
    return StreamNote(samples=table.values.shape[0],
                      time_name=table.time_name if fields else None, **fields)


def _check_decode_paths(args, profile: Profile | None = None) -> None:
    """No output of ``decode`` may name one of its inputs (or another output)."""
    stream = None if is_stdio(args.stream) else args.stream
    check_paths({"stream": stream, "profile": args.profile,
                 "recorded profile": note_path(stream) if stream else None,
                 "basis file": profile.basis_file if profile else None},
                {"output": args.output, "--json report": args.json})
    if not is_stdio(args.output):
        sample_suffix(args.output)


def _decode(args) -> int:
    _check_decode_paths(args)
    if is_stdio(args.stream) and not args.profile:
        raise InputError("a stream on standard input has no recorded profile; pass -p PROFILE",
                         "standard input")
    if args.reorder < 0:
        raise InputError("--reorder must be 0 or more windows", "command line")
    if args.max_fill < 0:
        raise InputError("--max-fill must be 0 or more windows", "command line")
    # A profile recorded beside a stream (STREAM.profile.toml) also gives its length.
    profile, note = (_stream_profile(args) if not is_stdio(args.stream)
                     else load_stream_note(args.profile))
    if not profile.channels:
        raise InputError("the profile lists no channels, so the stream's columns are unknown; "
                         "use the profile recorded beside the stream", args.profile)
    _check_decode_paths(args, profile)
    if not is_stdio(args.stream):
        with contextlib.suppress(OSError):  # an unreadable stream is reported when read
            check_note_fits(note, os.stat(args.stream).st_size, profile,
                            str(note_path(args.stream)))
    stuffing = args.stuffing or (note.stuffing if note and note.stuffing else "none")
    with contextlib.ExitStack() as stack:
        if not is_stdio(args.stream):  # a live pipeline shows its own pace
            stack.enter_context(busy(f"decoding {args.stream}"))
        report, blocks, dec = decode_report(
            _byte_chunks(args.stream), profile, note, stuffing, args.reorder, args.output,
            "standard input" if is_stdio(args.stream) else args.stream, max_fill=args.max_fill)
    check_some_frame_foreign(dec)
    names = [c.name for c in profile.channels]
    with contextlib.ExitStack() as stack:
        # both temporary files exist before either is renamed: all or nothing
        tmp_json = stack.enter_context(atomic_output(args.json)) if args.json else None
        if not is_stdio(args.output):
            tmp_out = stack.enter_context(atomic_output(args.output))
            values = (np.concatenate([b.samples for b in blocks]) if blocks
                      else np.zeros((0, len(names))))
            time = time_values(note, 0, values.shape[0])
            write_samples(args.output, SampleTable(
                values, names, time, note.time_name or "time" if note else "time",
                decimals=_decimals(profile),
                time_decimals=note.time_decimals if note else None), tmp_out)
        if tmp_json is not None:
            tmp_json.write_text(json_text(report), encoding="utf-8")
    out = sys.stderr if is_stdio(args.output) else sys.stdout
    c = report
    gapf = f" ({c['gap_frames_ok']} with gap masks)" if c["gap_frames_ok"] else ""
    print(f"{c['frames_ok'] + c['gap_frames_ok']} frames decoded{gapf} -> {c['samples']} "
          f"samples x {c['channels']} "
          f"channels: {c['samples_delivered']} delivered, {c['samples_lost']} lost, "
          f"{c['samples_gap']} gap; {c['frames_crc_failed']} CRC failures, "
          f"{c['bytes_skipped']} bytes skipped" + _event_summary(c)
          + ("" if c["end_known"] else "; the stream's end is not known (no stream note), so "
             "frames lost after the last one received are not counted"), file=out)
    print("\n".join(_count_table(c)), file=out)
    status = decode_exit_status(c)
    total = c["samples"] * c["channels"]
    if status == 0:
        print(f"every sample delivered ({c['samples_delivered']} of {total}"
              + (f"; the other {c['samples_gap']} were marked as gaps at encode"
                 if c["samples_gap"] else "") + "): exit status 0", file=out)
    elif c["frames_ok"] + c["gap_frames_ok"] == 0:
        print(f"nothing could be decoded: {c['samples_lost']} of {total} samples lost, exit "
              "status 1", file=out)
    else:
        print(f"{c['samples_lost']} of {total} samples lost: exit status 1", file=out)
    return status


def _count_table(c: dict) -> list[str]:
    """Per channel: its unit and how many samples were delivered, lost, or marked as gaps."""
    names = list(c["per_channel"])
    width = max([7] + [len(n) for n in names])
    uw = max([4] + [len(u or "-") for u in c["units"].values()])
    keys = ["samples_delivered", "samples_lost", "samples_gap"]
    lines = [f"{'channel':<{width}} {'unit':<{uw}} "
             + " ".join(f"{k.removeprefix('samples_'):>10}" for k in keys)]
    for n in names:
        lines.append(f"{n:<{width}} {c['units'].get(n) or '-':<{uw}} "
                     + " ".join(f"{c['per_channel'][n][k]:>10}" for k in keys))
    return lines


def _decimals(profile: Profile) -> list[int | None]:
    """CSV decimals of each channel: what its resolution needs (full precision without one)."""
    return [csv_decimals(c.resolution, c.max_error) for c in profile.channels]


def decode_exit_status(counts: dict) -> int:
    """0 when every sample is delivered (gaps marked at encode count as delivered), else 1.

    1 also when no frame at all could be decoded.  Usage and data errors exit
    2 before this is asked.
    """
    if counts["frames_ok"] + counts["gap_frames_ok"] == 0 or counts["samples_lost"] > 0:
        return 1
    return 0


_EVENT_KEYS = ("foreign_profile", "bad_header", "duplicate", "conflict", "late", "beyond_end",
               "before_start")


def _event_summary(c: dict) -> str:
    parts = [f"{c[f'frames_{k}']} {k.replace('_', ' ')}" for k in _EVENT_KEYS
             if c.get(f"frames_{k}")]
    return ("; frames refused: " + ", ".join(parts)) if parts else ""


def check_some_frame_foreign(dec: StreamDecoder) -> None:
    """No frame at all is a user error (exit 2) when there is nothing to account for.

    With the stream's length known (its note) a damaged stream is reported, all
    samples lost, exit 0; with frames only of another profile, or with no frame
    and no known length, the command says why and exits 2.
    """
    c = dec.counts()
    if c["frames_ok"] or c["gap_frames_ok"]:
        return
    if c.get("frames_foreign_profile") or not dec.end_known:
        check_some_frame(c, dec.events)


def _byte_chunks(path: str, size: int = 65536):
    """The stream's bytes in chunks (standard input as it arrives)."""
    if is_stdio(path):
        src = sys.stdin.buffer
        read = getattr(src, "read1", src.read)
        while chunk := read(size):
            yield chunk
        return
    try:
        fh = open(path, "rb")
    except FileNotFoundError:
        raise InputError("no such stream file; check the path", path) from None
    except OSError as exc:
        raise InputError(f"cannot read the stream ({exc.strerror})", path) from None
    with fh:
        while chunk := fh.read(size):
            yield chunk


def decode_report(chunks, profile: Profile, note: StreamNote | None, stuffing: str = "none",
                  reorder: int = 16, output: str | None = None, where: str = "the stream",
                  max_fill: int | None = None) -> tuple[dict, list, StreamDecoder]:
    """Run the streaming decoder over byte ``chunks``; return the report, blocks and decoder.

    With ``output`` ``-`` the released samples are written to standard output
    as CSV at once and not kept (a live pipeline); otherwise they are returned.
    A stuffed stream read as plain bytes (``stuffing`` none, samples lost, and
    the first bytes unstuff into more frames) raises :class:`InputError`
    naming the stuffing; ``where`` names the stream in that message.
    """
    run = ChunkDecoder(profile, note.samples if note else None, reorder, max_fill, stuffing)
    live = output is not None and is_stdio(output)
    blocks: list = []
    names = [c.name for c in profile.channels]
    timed = time_values(note, 0, 0) is not None
    if live:
        sys.stdout.write(",".join(([note.time_name or "time"] if timed else []) + names) + "\n")

    def take(new) -> None:
        if not live:
            blocks.extend(new)
            return
        for b in new:
            time = time_values(note, b.start, len(b.samples)) if timed else None
            write_csv_block(sys.stdout, b.samples, time, _decimals(profile),
                            note.time_decimals if note else None)
        sys.stdout.flush()

    for chunk in chunks:
        take(run.feed(chunk))
    # closing fills every sample up to the note's count: not beyond what the bytes carry
    check_note_fits(note, run.bytes_read, profile, "stream note")
    take(run.close())
    report = run.report()
    run.check_stuffing(where)
    return report, blocks, run.decoder


def roundtrip_report(values: np.ndarray, profile: Profile, enc=None):
    """Encode (unless ``enc`` is given), decode the bytes, check every frame on the decoded samples.

    The check is independent of the encoder's own: error energy per frame is
    recomputed from the decoded output and compared with the frame's budget.
    Returns ``(report, ok, decoded)``.
    """
    enc = enc if enc is not None else encode(values, profile)
    dec = decode(enc.data, enc.profile, samples=values.shape[0])
    if dec.samples.shape != values.shape or not dec.delivered.all():
        raise RuntimeError("a clean round trip lost samples")  # our bug
    report, ok = roundtrip_figures(values, enc, dec)
    return report, ok, dec


def _roundtrip(args) -> int:
    check_paths({"input": args.input, "profile": args.profile}, {"--json report": args.json})
    table = read_samples(args.input)
    profile = resolve_profile(args, table.names)
    check_paths({"basis file": profile.basis_file}, {"--json report": args.json})
    with busy(f"encoding and decoding {table.values.shape[0]} samples x "
              f"{table.values.shape[1]} channels"):
        report, ok, _ = roundtrip_report(table.values, profile)
    write_json(args.json, report)
    print(f"{report['frames']} frames, {report['bits_per_sample']:.3f} bits/sample "
          f"(ratio {fmt(report['compression_ratio'], '.2f')}), fidelity min "
          f"{fmt(report['fidelity_min'], '.5f')} (target {report['fidelity_target']} per "
          f"{report['fidelity_scope']}), "
          f"{report['frames_below_target']} frames below target "
          f"({report['frames_at_floor']} held to "
          f"the resolution floor); checked on the decoded samples")
    print_channel_figures(report)
    print(_CAUTION)
    return 0 if ok else 1


def _inspect(args) -> int:
    """List every frame: where, which version/kind, which window and channels, and verdict."""
    data = _read_stream(args.stream)
    profile = note = None
    if note_path(args.stream).is_file():
        profile, note = load_stream_note(note_path(args.stream))
    if args.profile:
        profile = load_profile(args.profile)
    stuffing = args.stuffing or (note.stuffing if note and note.stuffing else "none")
    if stuffing != "none":
        u = Unstuffer(stuffing)
        data = b"".join(u.feed(data) + u.close())
    listing = list_frames(data, profile)
    checked = profile is not None and bool(profile.channels)
    if stuffing == "none" and (kind := detect_stuffing(
            data[:SNIFF_BYTES], frame_key(profile) if checked else None)):
        raise InputError(f"the stream is {kind.upper()}-stuffed but was read as plain frames; "
                         f"inspect with --stuffing {kind}", args.stream)
    loc = listing.located
    if loc.offsets.size == 0 and not loc.crc_failures:
        raise FrameError("no frame with a valid sync marker and CRC was found; "
                         "is this a coefwire stream?", args.stream)
    names = [c.name for c in profile.channels] if checked else []
    units = [c.unit for c in profile.channels] if checked else []
    out = [f"{'byte':>9} {'kind':<6} {'seq':>6} {'channels':<20} {'basis':<8} {'terms':>5} "
           f"{'step':>14} {'bits':>7}  status"]
    for ln in listing.lines:
        if ln.bits is None:
            out.append(f"{ln.offset:>9} {'-':<6} {'-':>6} {'-':<20} {'-':<8} {'-':>5} {'-':>14} "
                       f"{'-':>7}  CRC FAILED")
        elif ln.sequence is None:
            out.append(f"{ln.offset:>9} {ln.kind:<6} {'?':>6} {'?':<20} {'?':<8} {'?':>5} "
                       f"{'?':>14} {ln.bits:>7}  not checked (no profile: the CRC covers it; "
                       "contents not read)")
        else:
            label = ",".join(names[c] if c < len(names) else str(c) for c in ln.channels)
            step = "-" if ln.step is None else format(ln.step, ".4g")
            # a step is in the channel's units (orthonormal basis); a multi-channel frame's
            # coarsest step has a unit only when its channels share one
            own = {units[c] if c < len(units) else None for c in ln.channels}
            if ln.step is not None and len(own) == 1 and (unit := own.pop()):
                step += f" {unit}"
            out.append(f"{ln.offset:>9} {ln.kind:<6} {ln.sequence:>6} {label[:20] or '-':<20} "
                       f"{ln.basis or '-':<8} {ln.terms:>5} {step:>14} {ln.bits:>7}  "
                       f"{ln.status}")
    out.append(f"{loc.offsets.size} frames pass their CRC, {len(loc.crc_failures)} CRC failures, "
               f"{loc.skipped_bytes} bytes outside frames"
               + (f" ({stuffing.upper()}-stuffed stream: offsets in the unstuffed frames)"
                  if stuffing != "none" else ""))
    sys.stdout.write("\n".join(out) + "\n")
    return 0
