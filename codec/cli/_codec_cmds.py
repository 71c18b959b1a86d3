"""``encode``, ``decode``, ``roundtrip`` and ``inspect``."""

from __future__ import annotations

import argparse
import contextlib
import sys
from pathlib import Path

import numpy as np

from .._bases import basis_from_code, basis_names
from .._codec import decode, encode
from .._errors import FrameError, InputError, TrimlinkError
from .._io import SampleTable, atomic_output, read_samples, write_samples
from .._layout import parse_headers
from .._profile import (
    Profile,
    StreamNote,
    load_profile,
    load_stream_note,
    note_path,
    profile_id,
    save_stream_note,
)
from .._quantize import step_from_code
from .._report import error_figures
from .._stream import locate_frames
from ._common import add_profile_options, check_distinct, fmt, resolve_profile, write_json

__all__ = ["register", "roundtrip_report"]

_CAUTION = ("caution: lossy coding; do not use it for signals on which safety depends "
            "unless the fidelity has been justified for that use.")


def register(sub: argparse._SubParsersAction) -> None:
    names = ", ".join(basis_names())
    p = sub.add_parser("encode", help="code a sample file into a stream of frames",
                       description=f"Code INPUT (.csv or .npy) into STREAM. Bases: {names}.")
    p.add_argument("input", metavar="INPUT")
    p.add_argument("-o", "--output", required=True, metavar="STREAM")
    add_profile_options(p)
    p.add_argument("--json", metavar="REPORT", help="write the JSON report here")
    p.set_defaults(handler=_encode)

    p = sub.add_parser("decode", help="decode a stream back into samples",
                       description="Decode STREAM into OUTPUT (.csv or .npy). Without -p the "
                       "profile recorded beside the stream (STREAM.profile.toml) is used.")
    p.add_argument("stream", metavar="STREAM")
    p.add_argument("-o", "--output", required=True, metavar="OUTPUT")
    p.add_argument("-p", "--profile", metavar="PROFILE")
    p.add_argument("--json", metavar="REPORT")
    p.set_defaults(handler=_decode)

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


def _encode(args) -> int:
    check_distinct(args.input, args.output)
    table = read_samples(args.input)
    profile = resolve_profile(args, table.names)
    result = encode(table.values, profile)
    note = _note_for(table)
    with contextlib.ExitStack() as stack:
        tmp_stream = stack.enter_context(atomic_output(args.output))
        tmp_note = stack.enter_context(atomic_output(note_path(args.output)))
        tmp_stream.write_bytes(result.data)
        save_stream_note(result.profile, note, tmp_note)
        if args.json:
            write_json(args.json, result.report)
    r = result.report
    print(f"{r['frames']} frames, {r['samples']} samples x {r['channels']} channels -> "
          f"{r['bits_total']} bits ({r['bits_per_sample']:.3f} bits/sample, "
          f"ratio {fmt(r['compression_ratio'], '.2f')}); fidelity min {fmt(r['fidelity_min'], '.5f')}"
          f" (target {r['fidelity_target']}), SNR {fmt(r['snr_db'], '.2f')} dB")
    print(_CAUTION)
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
    check_distinct(args.stream, args.output)
    profile, note = _stream_profile(args)
    data = _read_stream(args.stream)
    result = decode(data, profile, samples=note.samples if note else None)
    time = None
    if note and note.time_start is not None:
        time = note.time_start + note.time_step * np.arange(result.samples.shape[0])
    names = [c.name for c in profile.channels]
    write_samples(args.output, SampleTable(result.samples, names, time, note.time_name or "time"
                                           if note else "time"))
    report = {
        "frames": int(result.frames["offset"].size),
        "samples": int(result.samples.shape[0]),
        "channels": len(names),
        "bits_total": 8 * len(data),
        "frames_crc_failed": len(result.crc_failures),
        "bytes_skipped": result.skipped_bytes,
        "samples_delivered": int(result.delivered.sum()),
        "samples_missing": int((~result.delivered).sum()),
    }
    write_json(args.json, report)
    print(f"{report['frames']} frames decoded -> {report['samples']} samples x "
          f"{report['channels']} channels; {report['frames_crc_failed']} CRC failures, "
          f"{report['samples_missing']} samples missing")
    return 0


def roundtrip_report(values: np.ndarray, profile: Profile) -> tuple[dict, bool]:
    """Encode, decode the bytes, and check every frame on the decoded samples.

    The check is independent of the encoder's own: error energy per frame is
    recomputed from the decoded output and compared with the frame's budget.
    """
    enc = encode(values, profile)
    dec = decode(enc.data, enc.profile, samples=values.shape[0])
    if dec.samples.shape != values.shape or not dec.delivered.all():
        raise RuntimeError("a clean round trip lost samples")  # our bug
    n = enc.profile.frame_length
    info = enc.frames
    err = np.zeros(info["channel"].size)
    start = info["window"] * n
    for k in range(n):  # loop over the N positions of a frame, each over all frames at once
        idx = start + k
        inside = idx < values.shape[0]
        e = values[idx[inside], info["channel"][inside]] - \
            dec.samples[idx[inside], info["channel"][inside]]
        err[inside] += e * e
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
    return report, bool(met.all())


def _roundtrip(args) -> int:
    table = read_samples(args.input)
    profile = resolve_profile(args, table.names)
    report, ok = roundtrip_report(table.values, profile)
    write_json(args.json, report)
    print(f"{report['frames']} frames, {report['bits_per_sample']:.3f} bits/sample "
          f"(ratio {fmt(report['compression_ratio'], '.2f')}), fidelity min "
          f"{fmt(report['fidelity_min'], '.5f')} (target {report['fidelity_target']}), "
          f"{report['frames_below_target']} frames below target, SNR {fmt(report['snr_db'], '.2f')}"
          f" dB, PRD {fmt(report['prd_percent'], '.3f')} %, max abs error "
          f"{report['max_abs_error']:.6g}")
    print(_CAUTION)
    return 0 if ok else 1


def _inspect(args) -> int:
    data = _read_stream(args.stream)
    profile = None
    if args.profile:
        profile = load_profile(args.profile)
    elif note_path(args.stream).is_file():
        profile = load_stream_note(note_path(args.stream))[0]
    loc = locate_frames(data)
    if loc.offsets.size == 0 and not loc.crc_failures:
        raise FrameError("no frame with a valid sync marker and CRC was found; "
                         "is this a trimlink stream?", args.stream)
    head = parse_headers(np.frombuffer(data, np.uint8), loc.offsets)
    pid = profile_id(profile) if profile else None
    names = [c.name for c in profile.channels] if profile else None
    n = profile.frame_length if profile else None
    rows = [(int(o), "ok", i) for i, o in enumerate(loc.offsets)]
    rows += [(int(o), "CRC FAILED", None) for o in loc.crc_failures]
    rows.sort()
    out = [f"{'byte':>9} {'seq':>6} {'channel':<14} {'basis':<9} {'terms':>5} {'step':>11} "
           f"{'bits':>6}  crc"]
    for off, status, i in rows:
        if i is None:
            out.append(f"{off:>9} {'-':>6} {'-':<14} {'-':<9} {'-':>5} {'-':>11} {'-':>6}  {status}")
            continue
        ch = int(head["channel"][i])
        chan = names[ch] if names and ch < len(names) else str(ch)
        try:
            basis = basis_from_code(int(head["basis"][i]), n or 64).name
        except TrimlinkError:
            basis = f"#{int(head['basis'][i])}"
        flag = status
        if pid is not None and head["profile"][i] != pid:
            flag += " (other profile)"
        out.append(f"{off:>9} {int(head['sequence'][i]):>6} {chan:<14} {basis:<9} "
                   f"{int(head['terms'][i]):>5} {step_from_code(head['step_code'][i]):>11.4g} "
                   f"{int(loc.lengths[i]) * 8:>6}  {flag}")
    out.append(f"{loc.offsets.size} frames ok, {len(loc.crc_failures)} CRC failures, "
               f"{loc.skipped_bytes} bytes outside frames")
    sys.stdout.write("\n".join(out) + "\n")
    return 0


