"""``encode``, ``decode``, ``roundtrip`` and ``inspect``."""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
from pathlib import Path

import numpy as np

from .._bases import basis_names
from .._codec import check_some_frame, decode, decode_frames, encode, frame_key
from .._errors import FrameError, InputError
from .._framing import split_frames
from .._gaps import GAP_POLICIES
from .._io import (
    CsvBlockReader,
    SampleTable,
    atomic_output,
    is_stdio,
    read_samples,
    write_csv_block,
    write_samples,
)
from .._klt import profile_basis
from .._layout import GAP_KIND
from .._profile import (
    Profile,
    StreamNote,
    load_profile,
    load_stream_note,
    note_path,
    save_stream_note,
)
from .._quantize import step_from_code
from .._report import error_figures
from .._stream import STATUS_NAMES, locate_frames
from .._streaming import StreamDecoder, StreamEncoder
from .._stuffing import STUFFINGS, Unstuffer, stuff
from ._common import add_profile_options, check_distinct, fmt, resolve_profile, write_json

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
    p.set_defaults(handler=_quiet_broken_pipe(_encode))

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
    p.set_defaults(handler=_quiet_broken_pipe(_decode))

    p = sub.add_parser("roundtrip", help="encode, decode and check every frame meets the target",
                       description="Exit 0 when every frame meets the target, 1 when any "
                       "misses, 2 on a usage or data error.")
    p.add_argument("input", metavar="INPUT")
    add_profile_options(p)
    p.add_argument("--json", metavar="REPORT")
    p.set_defaults(handler=_roundtrip)

    p = sub.add_parser("inspect", help="list every frame of a stream")
    p.add_argument("stream", metavar="STREAM")
    p.add_argument("-p", "--profile", metavar="PROFILE")
    p.set_defaults(handler=_inspect)


def _add_stream_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--stuffing", choices=("none",) + STUFFINGS, default="none",
                   help="byte-stream framing for serial modems: SLIP (RFC 1055) or COBS "
                   "(Cheshire & Baker 1999), one frame per packet")


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


def _quiet_broken_pipe(handler):
    """A reader that closes the pipe early (``| head``) ends the command quietly."""
    def run(args) -> int:
        try:
            return handler(args)
        except BrokenPipeError:
            with contextlib.suppress(OSError):
                os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
            return 0
    return run


def write_stream(path: str | Path, table: SampleTable, profile: Profile, gaps: str = "refuse",
                 stuffing: str = "none"):
    """Encode ``table`` and write the stream plus its recorded profile, atomically together.

    ``path`` ``-`` writes the stream to standard output (no profile file then).
    """
    result = encode(table.values, profile, gaps=gaps)
    data = _stuff(result.data, stuffing)
    if is_stdio(path):
        sys.stdout.buffer.write(data)
        sys.stdout.buffer.flush()
        return result
    note = _note_for(table)
    with contextlib.ExitStack() as stack:
        tmp_stream = stack.enter_context(atomic_output(path))
        tmp_note = stack.enter_context(atomic_output(note_path(path)))
        tmp_stream.write_bytes(data)
        save_stream_note(result.profile, note, tmp_note)
    return result


def per_frame_table(frames: dict, fidelity: np.ndarray | None = None) -> dict:
    """The per-frame part of a JSON report, one list per column (compact for long streams)."""
    return {
        "window": frames["window"], "channel": frames["channel"], "bits": frames["bits"],
        "terms": frames["terms"], "step": step_from_code(frames["step_code"]),
        "fidelity": frames["fidelity"] if fidelity is None else fidelity,
        "at_floor": frames["floor"], "met": frames["met"],
    }


def _encode(args) -> int:
    if is_stdio(args.input):
        return _encode_live(args)
    if not is_stdio(args.output):
        check_distinct(args.input, args.output)
    table = read_samples(args.input, allow_gaps=args.gaps != "refuse")
    profile = resolve_profile(args, table.names)
    result = write_stream(args.output, table, profile, args.gaps, args.stuffing)
    write_json(args.json, {**result.report, "per_frame": per_frame_table(result.frames)})
    out = sys.stderr if is_stdio(args.output) else sys.stdout
    r = result.report
    print(f"{r['frames']} frames, {r['samples']} samples x {r['channels']} channels -> "
          f"{r['bits_total']} bits ({r['bits_per_sample']:.3f} bits/sample, "
          f"ratio {fmt(r['compression_ratio'], '.2f')}); fidelity min "
          f"{fmt(r['fidelity_min'], '.5f')} (target {r['fidelity_target']}), "
          f"SNR {fmt(r['snr_db'], '.2f')} dB", file=out)
    if r.get("samples_gap"):
        print(f"{r['samples_gap']} missing samples "
              f"{'filled by linear interpolation' if args.gaps == 'fill' else 'marked as gaps'}",
              file=out)
    print(_CAUTION, file=out)
    return 0


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
                enc = StreamEncoder(profile, len(reader.names), gaps=args.gaps)
            sink.write(_stuff(enc.feed(values), args.stuffing))
            sink.flush()
        if enc is None:
            raise InputError("no data rows arrived under the header", "standard input")
        sink.write(_stuff(enc.close(), args.stuffing))
        sink.flush()
        if not to_stdout:
            tmp_note = stack.enter_context(atomic_output(note_path(args.output)))
            save_stream_note(enc.profile, StreamNote(samples=enc.samples), tmp_note)
    print(f"{enc.window} windows, {enc.samples} samples x {len(reader.names)} channels -> "
          f"{8 * enc.bytes_out} bits ({8 * enc.bytes_out / (enc.samples * len(reader.names)):.3f}"
          " bits/sample)", file=info)
    if to_stdout:
        print("note: no STREAM.profile.toml is written for standard output; decode with -p "
              "PROFILE (the stream's end is then known only from a short last frame)", file=info)
    print(_CAUTION, file=info)
    return 0


def _note_for(table: SampleTable) -> StreamNote:
    start = step = None
    if table.time is not None and table.time.size:
        t = table.time
        if t.size == 1:
            start, step = float(t[0]), 0.0
        else:
            d = np.diff(t)
            if np.allclose(d, d[0], rtol=1e-9, atol=0.0):
                start, step = float(t[0]), float(d[0])
    if table.time is not None and start is None:
        print("note: the time column is not evenly spaced, so decode will not reproduce it",
              file=sys.stderr)
    return StreamNote(samples=table.values.shape[0],
                      time_name=table.time_name if start is not None else None,
                      time_start=start, time_step=step)


def _decode(args) -> int:
    if not is_stdio(args.stream) and not is_stdio(args.output):
        check_distinct(args.stream, args.output)
    if is_stdio(args.stream) and not args.profile:
        raise InputError("a stream on standard input has no recorded profile; pass -p PROFILE",
                         "standard input")
    if args.reorder < 0:
        raise InputError("--reorder must be 0 or more windows", "command line")
    # A profile recorded beside a stream (STREAM.profile.toml) also gives its length.
    profile, note = (_stream_profile(args) if not is_stdio(args.stream)
                     else load_stream_note(args.profile))
    if not profile.channels:
        raise InputError("the profile lists no channels, so the stream's columns are unknown; "
                         "use the profile recorded beside the stream", args.profile)
    report, blocks, dec = decode_report(_byte_chunks(args.stream), profile, note, args.stuffing,
                                        args.reorder, args.output)
    check_some_frame_foreign(dec)
    names = [c.name for c in profile.channels]
    if not is_stdio(args.output):
        values = (np.concatenate([b.samples for b in blocks]) if blocks
                  else np.zeros((0, len(names))))
        time = None
        if note and note.time_start is not None:
            time = note.time_start + note.time_step * np.arange(values.shape[0])
        write_samples(args.output, SampleTable(values, names, time, note.time_name or "time"
                                               if note else "time"))
    write_json(args.json, report)
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
                  reorder: int = 16, output: str | None = None
                  ) -> tuple[dict, list, StreamDecoder]:
    """Run the streaming decoder over byte ``chunks``; return the report, blocks and decoder.

    With ``output`` ``-`` the released samples are written to standard output
    as CSV at once and not kept (a live pipeline); otherwise they are returned.
    """
    dec = StreamDecoder(profile, samples=note.samples if note else None, reorder=reorder)
    unstuff = Unstuffer(stuffing) if stuffing != "none" else None
    live = output is not None and is_stdio(output)
    blocks: list = []
    names = [c.name for c in profile.channels]
    timed = note is not None and note.time_start is not None
    if live:
        sys.stdout.write(",".join(([note.time_name or "time"] if timed else []) + names) + "\n")

    def take(new) -> None:
        if live:
            for b in new:
                time = (note.time_start + note.time_step * (b.start + np.arange(len(b.samples)))
                        if timed else None)
                write_csv_block(sys.stdout, b.samples, time)
            sys.stdout.flush()
        else:
            blocks.extend(new)

    for chunk in chunks:
        if unstuff is None:
            take(dec.feed(chunk))
        else:
            for packet in unstuff.feed(chunk):
                take(dec.feed(packet))
    if unstuff is not None:
        for packet in unstuff.close():
            take(dec.feed(packet))
    take(dec.close())
    report = dec.counts()
    report["channels"] = len(names)
    report["bits_total"] = 8 * report["bytes_in"]
    if unstuff is not None:
        report["stuffing"] = stuffing
        report["packets_bad"] = unstuff.bad_packets
        report["packets_overlong"] = unstuff.overlong
    report["status_codes"] = {str(k): v for k, v in STATUS_NAMES.items()}
    report["events"] = dec.events
    report["samples_check"] = ("samples_delivered + samples_lost + samples_gap + "
                               "samples_concealed = samples x channels")
    return report, blocks, dec


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
    n = enc.profile.frame_length
    info = enc.frames
    # Error energy of every (window, channel) frame over its real samples only.
    e, valid, _, _ = split_frames(values - dec.samples, n)
    e = np.where(np.arange(n) < valid[:, None], e, 0.0)
    err_rows = np.einsum("ij,ij->i", e, e)  # window-major rows: window * channels + channel
    err = err_rows[info["window"] * values.shape[1] + info["channel"]]
    met = err <= info["budget"]
    e_ref = info["reference_energy"]
    fidelity = np.where(e_ref > 0, 1.0 - err / np.where(e_ref > 0, e_ref, 1.0), 1.0)
    report = dict(enc.report)
    judged = fidelity[~info["floor"]]
    report.update({
        "fidelity_min": float(judged.min()) if judged.size else None,
        "fidelity_mean": float(judged.mean()) if judged.size else None,
        "frames_below_target": int((~met).sum()),
        "decoded_check": "error energy per frame recomputed from the decoded samples",
    })
    report.update(error_figures(values, dec.samples))
    report["per_frame"] = per_frame_table({**info, "met": met}, fidelity)
    return report, bool(met.all()), dec


def _roundtrip(args) -> int:
    table = read_samples(args.input)
    profile = resolve_profile(args, table.names)
    report, ok, _ = roundtrip_report(table.values, profile)
    write_json(args.json, report)
    print(f"{report['frames']} frames, {report['bits_per_sample']:.3f} bits/sample "
          f"(ratio {fmt(report['compression_ratio'], '.2f')}), fidelity min "
          f"{fmt(report['fidelity_min'], '.5f')} (target {report['fidelity_target']}), "
          f"{report['frames_below_target']} frames below target "
          f"({report['frames_at_floor']} held to "
          f"the resolution floor), SNR {fmt(report['snr_db'], '.2f')}"
          f" dB, PRD {fmt(report['prd_percent'], '.3f')} %, max abs error "
          f"{report['max_abs_error']:.6g}")
    print(_CAUTION)
    return 0 if ok else 1


def _inspect(args) -> int:
    """List every frame: where, which version/kind, which window and channels, and verdict.

    Goes through the same per-frame interpreter as the decoder, so it reads
    every layout version and gap-mask frames, and a damaged frame is a line.
    """
    data = _read_stream(args.stream)
    profile = None
    if args.profile:
        profile = load_profile(args.profile)
    elif note_path(args.stream).is_file():
        profile = load_stream_note(note_path(args.stream))[0]
    # The CRC covers the profile (FRAME_LAYOUT.md, "Profile check"): without one, frames
    # are only split as their envelopes claim.
    loc = locate_frames(data, frame_key(profile) if profile and profile.channels else None)
    if loc.offsets.size == 0 and not loc.crc_failures:
        raise FrameError("no frame with a valid sync marker and CRC was found; "
                         "is this a coefwire stream?", args.stream)
    fr = None
    if profile is not None and profile.channels:
        fr = decode_frames(loc.frames, profile, profile_basis(profile))
    names = [c.name for c in profile.channels] if profile and profile.channels else None
    rows = [(int(o), i) for i, o in enumerate(loc.offsets)]
    rows += [(int(o), None) for o in loc.crc_failures]
    rows.sort()
    out = [f"{'byte':>9} {'kind':<6} {'seq':>6} {'channels':<20} {'terms':>5} {'bits':>7}  status"]
    for off, i in rows:
        if i is None:
            out.append(f"{off:>9} {'-':<6} {'-':>6} {'-':<20} {'-':>5} {'-':>7}  CRC FAILED")
            continue
        version = loc.frames[i][2] >> 4
        kind = "gap" if version == GAP_KIND else f"v{version}"
        bits = 8 * len(loc.frames[i])
        if fr is None:
            out.append(f"{off:>9} {kind:<6} {'?':>6} {'?':<20} {'?':>5} {bits:>7}  "
                       "not checked (no profile: the CRC covers it; contents not read)")
            continue
        chans = fr.row_channel[fr.row_frame == i].tolist()
        chans += [c for c, _ in fr.masks.get(i, ())]
        label = ",".join(names[c] if c < len(names) else str(c) for c in sorted(set(chans)))
        status = "ok" if fr.verdict[i] == "ok" else f"{fr.verdict[i]}: {fr.detail[i]}"
        out.append(f"{off:>9} {kind:<6} {int(fr.sequence[i]):>6} {label[:20] or '-':<20} "
                   f"{int(fr.head['terms'][i]):>5} {bits:>7}  {status}")
    out.append(f"{loc.offsets.size} frames pass their CRC, {len(loc.crc_failures)} CRC failures, "
               f"{loc.skipped_bytes} bytes outside frames")
    sys.stdout.write("\n".join(out) + "\n")
    return 0
