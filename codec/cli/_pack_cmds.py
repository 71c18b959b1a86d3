"""``pack-dict``, ``pack`` and ``unpack``: batch mode for store-and-forward links.

``pack-dict`` trains a zstd dictionary on sample streams of one profile and
writes it with a TOML provenance note (``DICT.note.toml``); ``pack`` packs a
stream into one zstd frame with that dictionary (or none) and reports the bits
against sending the frames as they are; ``unpack`` gives the exact stream
bytes back, with the stream's profile note, under a decompression cap.

The pack file is a single zstd frame (RFC 8878) whose header names the
dictionary id it needs; the stream's profile note travels beside it as
``PACK.profile.toml``, a byte-for-byte copy of ``STREAM.profile.toml``.
"""

from __future__ import annotations

import argparse
import contextlib
import hashlib
import sys
from pathlib import Path

from .._errors import CoefwireError, FrameError, InputError
from .._io import atomic_output
from .._profile import (
    Profile,
    StreamNote,
    check_note_fits,
    load_stream_note,
    note_path,
    profile_id,
)
from ..report import pack_command_report, pack_report
from ..stream.packs import (
    PACK_LEVEL,
    dictionary_id,
    dictionary_note,
    dictionary_note_path,
    load_dictionary_note,
    make_pack,
    open_pack,
    pack_dictionary_id,
    save_dictionary_note,
    train_dictionary,
)
from ..stream.search import locate_frames
from .common import check_paths, json_text

__all__ = ["register", "DEFAULT_CAP_BYTES"]

#: Default decompression cap of ``unpack`` (256 MiB).
DEFAULT_CAP_BYTES = 1 << 28


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "pack-dict", help="train a zstd dictionary for packs on sample streams",
        description="Train a zstd dictionary (zstd's own trainer, one sample per frame) on "
        "the frames of one or more STREAMs written by 'coefwire encode' (each with its "
        "STREAM.profile.toml beside it; all of one profile) and write DICT plus its "
        "provenance note DICT.note.toml. Both ends of the link must hold the dictionary.")
    p.add_argument("streams", nargs="+", metavar="STREAM")
    p.add_argument("-o", "--output", required=True, metavar="DICT",
                   help="dictionary file to write")
    p.add_argument("--size", type=int, default=4096, metavar="BYTES",
                   help="largest dictionary size in bytes (default 4096)")
    p.set_defaults(handler=_pack_dict)

    p = sub.add_parser(
        "pack", help="pack a stream into one zstd pack and report the bits saved",
        description="Pack STREAM (written by 'coefwire encode', with its STREAM.profile.toml) "
        f"into one zstd frame (level {PACK_LEVEL}) with DICT, or with no dictionary, and "
        "report its bits against sending the frames as they are. Without -o it only "
        "measures. With -o it writes PACK and a copy of the profile note as "
        "PACK.profile.toml; with --only-if-smaller as well, it writes them only when the "
        "pack saves bits. Exit 0 either way: the verdict is printed and in the JSON "
        "(pack_written). Per-sample figures divide by samples x channels.")
    p.add_argument("stream", metavar="STREAM")
    p.add_argument("-o", "--output", metavar="PACK", help="pack file to write")
    p.add_argument("-d", "--dictionary", metavar="DICT",
                   help="dictionary from 'coefwire pack-dict' (default: none)")
    p.add_argument("--only-if-smaller", action="store_true",
                   help="write the pack only when it is smaller than the stream")
    p.add_argument("--json", metavar="REPORT", help="write the JSON report here")
    p.set_defaults(handler=_pack_cmd)

    p = sub.add_parser(
        "unpack", help="unpack a pack back into its stream",
        description="Unpack PACK into STREAM, byte for byte, and copy PACK.profile.toml "
        "to STREAM.profile.toml so 'coefwire decode STREAM' works. The dictionary must be "
        "the one the pack names (its zstd dictionary id); a pack that would expand "
        "beyond the cap is refused before it is expanded.")
    p.add_argument("pack", metavar="PACK")
    p.add_argument("-o", "--output", required=True, metavar="STREAM")
    p.add_argument("-d", "--dictionary", metavar="DICT",
                   help="the dictionary the pack was packed with")
    p.add_argument("--max-bytes", type=int, default=DEFAULT_CAP_BYTES, metavar="N",
                   help="refuse a pack that expands beyond N bytes "
                   f"(default {DEFAULT_CAP_BYTES})")
    p.set_defaults(handler=_unpack_cmd)


def _read(path: str | Path, what: str) -> bytes:
    try:
        return Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError(f"no such {what} file; check the path", str(path)) from None
    except OSError as exc:
        raise InputError(f"cannot read the {what} ({exc.strerror})", str(path)) from None


@contextlib.contextmanager
def _at(path: str | Path):
    """Name ``path`` as the place of any user error raised inside."""
    try:
        yield
    except CoefwireError as exc:
        raise type(exc)(exc.message, str(path)) from None


def _stream_and_note(path: str) -> tuple[bytes, Profile, StreamNote | None]:
    """A stream's bytes and the profile note recorded beside it (required)."""
    note = note_path(path)
    data = _read(path, "stream")
    if not note.is_file():
        raise InputError(f"no profile recorded at {note}; use a stream written by "
                         "'coefwire encode' to a file, with its note beside it", path)
    profile, extra = load_stream_note(note)
    return data, profile, extra


def _frame_count(data: bytes, path: str) -> int:
    n = int(locate_frames(data).offsets.size)
    if n == 0:
        raise FrameError("no frame with a valid sync marker and CRC was found; give a coefwire "
                         "stream written without --stuffing", path)
    return n


def _pack_dict(args) -> int:
    if args.size < 256:
        raise InputError("--size must be at least 256 bytes", "command line")
    ids: dict[int, str] = {}
    streams: list[bytes] = []
    frames = 0
    for path in args.streams:
        check_paths({"stream": path, "recorded profile": note_path(path)},
                    {"output": args.output, "dictionary note": dictionary_note_path(args.output)})
    for path in args.streams:
        data, profile, _ = _stream_and_note(path)
        frames += _frame_count(data, path)
        ids.setdefault(profile_id(profile), path)
        streams.append(data)
    if len(ids) > 1:
        (a, first), (b, other) = list(ids.items())[:2]
        raise InputError(f"{first} has profile id {a:#06x} but {other} has {b:#06x}; train "
                         "one dictionary per profile", "command line")
    with _at(args.output):
        dictionary = train_dictionary(streams, args.size)
    note = dictionary_note(dictionary, [str(p) for p in args.streams], frames, next(iter(ids)))
    with contextlib.ExitStack() as stack:
        tmp_dict = stack.enter_context(atomic_output(args.output))
        tmp_note = stack.enter_context(atomic_output(dictionary_note_path(args.output)))
        tmp_dict.write_bytes(dictionary)
        save_dictionary_note(note, tmp_note)
    print(f"trained a {note.dictionary_bytes}-byte zstd dictionary (id "
          f"{note.zstd_dictionary_id}) on {frames} frames of {len(args.streams)} stream(s), "
          f"profile id {note.profile_id:#06x} -> {args.output} (note: "
          f"{dictionary_note_path(args.output)}); sha256 {note.sha256}")
    return 0


def _load_dictionary(path: str, stream_profile_id: int) -> bytes:
    """The dictionary file, checked against its note when the note is there."""
    dictionary = _read(path, "dictionary")
    with _at(path):
        dictionary_id(dictionary)
    note_file = dictionary_note_path(path)
    if note_file.is_file():
        note = load_dictionary_note(note_file)
        if note.sha256 != hashlib.sha256(dictionary).hexdigest():
            raise InputError(f"the dictionary's SHA-256 differs from the one in {note_file}; "
                             "restore the file or retrain it", path)
        if note.profile_id != stream_profile_id:
            print(f"note: the dictionary was trained on streams of profile id "
                  f"{note.profile_id:#06x}, this stream has {stream_profile_id:#06x}; it will "
                  "likely save less", file=sys.stderr)
    return dictionary


def _pack_cmd(args) -> int:
    check_paths({"stream": args.stream, "recorded profile": note_path(args.stream),
                 "dictionary": args.dictionary,
                 "dictionary note": dictionary_note_path(args.dictionary)
                 if args.dictionary else None},
                {"output": args.output,
                 "pack's profile note": note_path(args.output) if args.output else None,
                 "--json report": args.json})
    data, profile, extra = _stream_and_note(args.stream)
    if extra is None:
        raise InputError(f"{note_path(args.stream)} has no [stream] table, so the number of "
                         "samples is unknown; re-encode the stream to a file", args.stream)
    check_note_fits(extra, len(data), profile, str(note_path(args.stream)))
    _frame_count(data, args.stream)
    dictionary = _load_dictionary(args.dictionary, profile_id(profile)) if args.dictionary \
        else None
    pack = make_pack(data, dictionary)
    channels = len(profile.channels)
    base = pack_report(data, pack, extra.samples * channels, dictionary)
    write = bool(args.output) and (base["bits_saved"] > 0 or not args.only_if_smaller)
    report = pack_command_report(
        base, extra.samples, channels,
        hashlib.sha256(dictionary).hexdigest() if dictionary else None,
        pack_dictionary_id(pack), write)
    with contextlib.ExitStack() as stack:
        # every temporary file exists before any is renamed: all or nothing
        tmp_json = stack.enter_context(atomic_output(args.json)) if args.json else None
        if write:
            note_bytes = note_path(args.stream).read_bytes()
            tmp_pack = stack.enter_context(atomic_output(args.output))
            tmp_note = stack.enter_context(atomic_output(note_path(args.output)))
            tmp_pack.write_bytes(pack)
            tmp_note.write_bytes(note_bytes)
        if tmp_json is not None:
            tmp_json.write_text(json_text(report), encoding="utf-8")
    r = report
    dict_text = (f"dictionary id {r['zstd_dictionary_id']} ({r['dictionary_bytes']} bytes, held "
                 "by both ends, not counted)" if dictionary else "no dictionary")
    print(f"{r['frames']} frames: {r['per_frame_bits']} bits as frames "
          f"({r['per_frame_bits_per_sample']:.3f} bits/sample) -> {r['pack_bits']} bits as a "
          f"pack ({r['pack_bits_per_sample']:.3f} bits/sample) with {dict_text}; "
          f"{r['bits_saved']} bits saved ({r['saved_percent']:.1f} %)")
    print(r["verdict"])
    if write:
        print(f"wrote {args.output} and {note_path(args.output)}")
    elif args.output:
        print(f"--only-if-smaller: {args.output} not written")
    return 0


def _unpack_cmd(args) -> int:
    if args.max_bytes < 1:
        raise InputError("--max-bytes must be at least 1", "command line")
    check_paths({"pack": args.pack, "pack's profile note": note_path(args.pack),
                 "dictionary": args.dictionary,
                 "dictionary note": dictionary_note_path(args.dictionary)
                 if args.dictionary else None},
                {"output": args.output, "recorded profile": note_path(args.output)})
    pack = _read(args.pack, "pack")
    dictionary = None
    if args.dictionary:
        dictionary = _read(args.dictionary, "dictionary")
        with _at(args.dictionary):
            dictionary_id(dictionary)
    with _at(args.pack):
        need = pack_dictionary_id(pack)
        if need and dictionary is None:
            raise FrameError(f"the pack was packed with the zstd dictionary of id {need}; "
                             "give it with --dictionary DICT (its DICT.note.toml lists "
                             "zstd_dictionary_id)")
        data = open_pack(pack, dictionary, max_output_size=args.max_bytes)
    if dictionary is not None and not need:
        print("note: the pack was packed without a dictionary; the one given is not used",
              file=sys.stderr)
    note_src = note_path(args.pack)
    note_bytes = None
    if note_src.is_file():
        # a readable profile note whose sample count the stream can carry, or one sentence now
        profile, extra = load_stream_note(note_src)
        check_note_fits(extra, len(data), profile, str(note_src))
        note_bytes = note_src.read_bytes()
    with contextlib.ExitStack() as stack:
        tmp_stream = stack.enter_context(atomic_output(args.output))
        if note_bytes is not None:
            tmp_note = stack.enter_context(atomic_output(note_path(args.output)))
            tmp_note.write_bytes(note_bytes)
        tmp_stream.write_bytes(data)
    frames = int(locate_frames(data).offsets.size)
    print(f"{len(pack)} bytes -> {len(data)} bytes, {frames} frames -> {args.output}"
          + (f" (profile: {note_path(args.output)})" if note_bytes is not None else ""))
    if note_bytes is None:
        print(f"note: no profile recorded at {note_src}; decode the stream with -p PROFILE",
              file=sys.stderr)
    return 0
