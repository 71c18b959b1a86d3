"""Batch mode for store-and-forward links: many frames in one zstd pack.

A live link sends frames one by one, so each frame must stand alone.  A
store-and-forward link (a logger emptied over a pass, a relay) may instead
send a whole batch at once; then a general-purpose compressor can remove what
frames repeat among themselves: sync markers, profile byte, sequence numbers,
similar header fields.  The pack is a zstandard frame of the concatenated
stream compressed with a dictionary that zstd's own trainer
(``zstandard.train_dictionary``, the ZDICT/COVER algorithm) builds from sample
frames of the profile's scenario; both ends hold the dictionary beforehand, so
it is not counted in the pack's bits (its size is reported).

The frames inside stay exactly the bytes the per-frame coder made, so a
decoded pack goes straight to :func:`codec.decode`.  Whether the pack
saves anything is measured, not assumed: :func:`pack_report` states the bits
against per-frame coding, and says so when the pack costs more.

References
----------
Y. Collet and M. Kucherawy, "Zstandard Compression and the application/zstd
Media Type", RFC 8878, 2021 (dictionaries: section 5).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
from pathlib import Path

import tomli_w
import zstandard
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from .._errors import FrameError, InputError, ProfileError
from .._profile import read_toml
from ..report import pack_report  # the pack report's keys are built with every other report's
from .search import locate_frames

__all__ = ["train_dictionary", "make_pack", "open_pack", "pack_report", "PACK_LEVEL",
           "dictionary_id", "pack_dictionary_id", "DictionaryNote", "dictionary_note",
           "dictionary_note_path", "save_dictionary_note", "load_dictionary_note"]

#: zstd level used for packs (store-and-forward: time is cheap, bits are not).
PACK_LEVEL = 19

#: Bytes expanded per read while a pack is checked against its cap (1 MiB).
_READ_PIECE = 1 << 20


def _frames_of(data: bytes) -> list[bytes]:
    return locate_frames(data).frames


def train_dictionary(sample_streams: list[bytes], size_bytes: int = 4096) -> bytes:
    """A zstd dictionary trained on the frames of ``sample_streams`` (one sample per frame).

    Raises :class:`InputError` when there are too few frames for zstd's trainer.
    """
    samples = [f for s in sample_streams for f in _frames_of(s)]
    if len(samples) < 8:
        raise InputError(f"only {len(samples)} sample frames; train the pack dictionary on "
                         "at least 8 frames", "dictionary")
    try:
        d = zstandard.train_dictionary(size_bytes, samples, level=PACK_LEVEL)
    except zstandard.ZstdError as exc:
        raise InputError(f"zstd could not train a dictionary ({exc}); give more or larger "
                         "sample frames", "dictionary") from None
    return d.as_bytes()


def dictionary_id(dictionary: bytes) -> int:
    """The zstd dictionary id written in a dictionary's header (RFC 8878, section 5).

    Raises :class:`InputError` when the bytes are not a zstd dictionary (raw
    content would give id 0, and a pack could then not name what it needs).
    """
    if len(dictionary) < 8 or dictionary[:4] != b"\x37\xa4\x30\xec":
        raise InputError("not a zstd dictionary (no dictionary magic number); make one with "
                         "the pack dictionary trainer", "dictionary")
    did = zstandard.ZstdCompressionDict(dictionary).dict_id()
    if did == 0:
        raise InputError("the zstd dictionary has id 0, so a pack could not name it; "
                         "retrain the dictionary", "dictionary")
    return did


def pack_dictionary_id(pack: bytes) -> int:
    """The dictionary id in the pack's zstd frame header (0: packed without a dictionary)."""
    try:
        return zstandard.get_frame_parameters(pack).dict_id
    except zstandard.ZstdError:
        raise FrameError("not a zstd pack; check the file", "pack") from None


def make_pack(data: bytes, dictionary: bytes | None = None) -> bytes:
    """Compress a stream of frames into one pack (zstd level 19, optional dictionary).

    The zstd frame header records the stream's size and the dictionary's id,
    so the receiver knows which dictionary the pack needs and how large it
    will be before it expands anything.
    """
    if dictionary:
        dictionary_id(dictionary)  # a real zstd dictionary, so the frame names it
    zd = zstandard.ZstdCompressionDict(dictionary) if dictionary else None
    zc = zstandard.ZstdCompressor(level=PACK_LEVEL, dict_data=zd, write_content_size=True,
                                  write_dict_id=True)
    return zc.compress(data)


def open_pack(pack: bytes, dictionary: bytes | None = None,
                  max_output_size: int = 1 << 28) -> bytes:
    """The stream inside ``pack``; refuses to expand beyond ``max_output_size`` bytes.

    The cap protects the receiver from a corrupt or hostile pack that would
    expand without bound: a declared size over the cap is refused before
    anything is expanded, and a pack without a declared size is read
    through a stream that stops one byte past the cap.  The dictionary id the
    pack's frame names must be the given dictionary's; a dictionary given
    for a pack packed without one is not used.  Bytes after the pack's
    zstd frame are refused (the stream would otherwise come back cut short).
    """
    need = pack_dictionary_id(pack)
    if need and not dictionary:
        raise FrameError(f"the pack was packed with the zstd dictionary of id {need}; "
                         "give that dictionary", "pack")
    if need and dictionary_id(dictionary) != need:
        raise FrameError(f"the pack needs the zstd dictionary of id {need}, but the one "
                         f"given has id {dictionary_id(dictionary)}; give the dictionary it "
                         "was packed with", "pack")
    zd = zstandard.ZstdCompressionDict(dictionary) if need else None
    dz = zstandard.ZstdDecompressor(dict_data=zd)
    size = zstandard.get_frame_parameters(pack).content_size
    if size != zstandard.CONTENTSIZE_UNKNOWN and size > max_output_size:
        raise FrameError(f"the pack would expand to {size} bytes, over the "
                         f"{max_output_size}-byte cap; raise the cap if it is genuine", "pack")
    try:
        # Read in pieces: reader.read(cap + 1) would allocate the whole cap up front
        # (100 GB for a cap of 1e11), whatever the pack holds.
        parts: list[bytes] = []
        got = 0
        with dz.stream_reader(pack, read_across_frames=False) as reader:
            while got <= max_output_size:
                piece = reader.read(min(_READ_PIECE, max_output_size + 1 - got))
                if not piece:
                    break
                parts.append(piece)
                got += len(piece)
        capped = b"".join(parts)
        if len(capped) > max_output_size:
            raise FrameError(f"the pack expands beyond the {max_output_size}-byte cap; "
                             "raise the cap if it is genuine", "pack")
        # Within the cap: expand once more to learn where the zstd frame ends.
        obj = dz.decompressobj()
        data = obj.decompress(pack)
    except zstandard.ZstdError as exc:
        raise FrameError(f"the pack does not decompress ({exc}); it is corrupt or needs "
                         "another dictionary", "pack") from None
    if not obj.eof:
        raise FrameError("the pack ends inside its zstd frame; it was cut short", "pack")
    if obj.unused_data:
        raise FrameError(f"{len(obj.unused_data)} bytes follow the pack's zstd frame; "
                         "a pack is exactly one zstd frame", "pack")
    if data != capped:
        raise RuntimeError("the two expansions of one pack differ")  # our bug
    return data


class DictionaryNote(BaseModel):
    """Provenance of a pack dictionary, kept as TOML beside it (``DICT.note.toml``).

    Sizes are in bytes; ``sha256`` is the SHA-256 of the dictionary file, so
    both ends can check they hold the same one; ``zstd_dictionary_id`` is the
    id every pack packed with it names in its frame header.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    streams: tuple[str, ...] = Field(min_length=1)
    frames_used: int = Field(ge=1)
    profile_id: int = Field(ge=0, le=0xFFFF)
    dictionary_bytes: int = Field(ge=1)
    zstd_dictionary_id: int = Field(ge=1)
    zstd_level: int = PACK_LEVEL
    sha256: str = Field(pattern=r"^[0-9a-f]{64}$")
    trained_utc: str


def dictionary_note(dictionary: bytes, streams: list[str], frames_used: int,
                    profile_id: int) -> DictionaryNote:
    """The provenance note of a freshly trained ``dictionary``."""
    return DictionaryNote(
        streams=tuple(streams), frames_used=frames_used, profile_id=profile_id,
        dictionary_bytes=len(dictionary), zstd_dictionary_id=dictionary_id(dictionary),
        sha256=hashlib.sha256(dictionary).hexdigest(),
        trained_utc=_dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat())


def dictionary_note_path(dictionary_path: str | Path) -> Path:
    """Where the note of a dictionary file is kept: ``DICT.note.toml``."""
    return Path(f"{dictionary_path}.note.toml")


def save_dictionary_note(note: DictionaryNote, path: str | Path) -> None:
    """Write ``note`` as TOML to ``path``."""
    Path(path).write_text(tomli_w.dumps(note.model_dump()), encoding="utf-8")


def load_dictionary_note(path: str | Path) -> DictionaryNote:
    """Read a dictionary note, naming the file on any error."""
    data = read_toml(path, "dictionary note")  # size and depth checked before parsing
    try:
        return DictionaryNote.model_validate(data)
    except ValidationError as exc:
        raise ProfileError(f"not a readable dictionary note ({exc.__class__.__name__}); "
                           "retrain the dictionary or remove the note", str(path)) from None
