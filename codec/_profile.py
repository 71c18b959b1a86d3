"""Profiles: everything both ends of a link must agree on, read from TOML.

A profile fixes the frame length, basis, fidelity target, energy reference and
the channels (name, sensor resolution, raw bits per sample, sample rate).  Its
canonical form is hashed into a 16-bit identifier carried by every frame, so a
decoder refuses frames made under another profile.
"""

from __future__ import annotations

import hashlib
import json
import re
import tomllib
from pathlib import Path
from typing import Literal

import numpy as np
import tomli_w
from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from ._bases import MAX_FRAME_LENGTH, basis_names
from ._errors import InputError, ProfileError

__all__ = [
    "ChannelSpec",
    "Profile",
    "default_profile",
    "load_profile",
    "save_profile",
    "profile_id",
    "MAX_CHANNELS",
    "StreamNote",
    "load_stream_note",
    "save_stream_note",
    "note_path",
    "read_toml",
    "loads_toml",
    "toml_depth",
    "MAX_TOML_BYTES",
    "MAX_TOML_DEPTH",
    "MIN_FRAME_BYTES",
    "MAX_WINDOWS_PER_FRAME",
    "note_sample_limit",
    "check_note_fits",
    "MAX_NAME_CHARS",
    "check_channel_names",
]

#: Channels one stream can carry (the frame header's channel field is 8 bits).
MAX_CHANNELS = 256


#: Characters a channel name may have.
MAX_NAME_CHARS = 64


def check_channel_names(names: list[str], where: str = "input") -> None:
    """Refuse column names a profile cannot hold: too many, empty, too long or repeated.

    The encoder checks the input's names here, so no stream is written whose
    own recorded profile the decoder would then refuse.
    """
    if len(names) > MAX_CHANNELS:
        raise InputError(f"the input has {len(names)} columns but a stream carries at most "
                         f"{MAX_CHANNELS} channels; split the columns over several streams",
                         where)
    for i, name in enumerate(names):
        if not name:
            raise InputError(f"column {i + 1} has an empty name; name every column", where)
        if len(name) > MAX_NAME_CHARS:
            raise InputError(f"column {i + 1}'s name ({name[:24]}...) has {len(name)} "
                             f"characters, over the {MAX_NAME_CHARS} a profile holds; shorten "
                             "it", where)
    seen: set[str] = set()
    dup = sorted({n for n in names if n in seen or seen.add(n)})
    if dup:
        raise InputError(f"column names repeat ({', '.join(dup)}); give every column its own "
                         "name", where)


class ChannelSpec(BaseModel):
    """One sensor channel.

    ``resolution`` is in the channel's engineering units (e.g. the sensor's
    LSB): the error budget of a frame is never below N * resolution**2 / 12,
    the energy of the sensor's own quantization noise.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    name: str = Field(min_length=1, max_length=MAX_NAME_CHARS)
    resolution: float = Field(default=0.0, ge=0.0, allow_inf_nan=False)
    raw_bits_per_sample: int = Field(default=16, ge=1, le=64)
    sample_rate_hz: float | None = Field(default=None, gt=0.0, allow_inf_nan=False)
    #: Plausible range of the physical quantity; decoded values outside are flagged.
    valid_min: float | None = Field(default=None, allow_inf_nan=False)
    valid_max: float | None = Field(default=None, allow_inf_nan=False)
    #: Peak-error limit in engineering units: no decoded sample of this channel
    #: is further than this from the input (None: no limit).
    max_error: float | None = Field(default=None, gt=0.0, allow_inf_nan=False)


class Profile(BaseModel):
    """Codec settings shared by encoder and decoder.

    With no ``channels`` the profile applies to every input column with the
    channel defaults; :meth:`bind` makes the channel list explicit.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    description: str = ""
    frame_length: int = Field(default=64, ge=2, le=MAX_FRAME_LENGTH)
    basis: str = "dct"
    #: 0 means no energy target (a peak-error limit alone then sets the quality).
    fidelity: float = Field(default=0.99, ge=0.0, le=1.0)
    reference: Literal["total", "ac"] = "ac"
    #: Frame layout the encoder writes (the decoder reads every version); 4 is 3 with
    #: dependent (trellis-coded) quantization.
    layout_version: Literal[1, 2, 3, 4] = 3
    #: Layouts 2 to 4: one frame (one header) carries all channels of a time window.
    multi_channel_frames: bool = False
    #: Layouts 3 and 4: consecutive time windows one frame carries (1 to 16); more
    #: windows share one header but a lost frame loses them all.
    windows_per_frame: int = Field(default=8, ge=1, le=16)
    channels: tuple[ChannelSpec, ...] = Field(default=(), max_length=MAX_CHANNELS)
    #: A trained basis (basis = "klt"): its .cwbasis.npz file and the SHA-256 of its matrix.
    basis_file: str | None = None
    basis_sha256: str | None = Field(default=None, pattern=r"^[0-9a-fA-F]{64}$")

    @model_validator(mode="after")
    def _trained_basis(self) -> Profile:
        trained = self.basis_file is not None or self.basis_sha256 is not None
        if self.basis == "klt" and (self.basis_file is None or self.basis_sha256 is None):
            raise ValueError("basis 'klt' needs basis_file and basis_sha256 (the file and hash "
                             "'coefwire train' prints)")
        if self.basis != "klt" and trained:
            raise ValueError("basis_file and basis_sha256 belong to basis 'klt' only")
        return self

    @field_validator("basis")
    @classmethod
    def _known_basis(cls, value: str) -> str:
        if value not in basis_names():
            raise ValueError(f"unknown basis {value!r}; choose one of: {', '.join(basis_names())}")
        return value

    @field_validator("channels")
    @classmethod
    def _unique_names(cls, value: tuple[ChannelSpec, ...]) -> tuple[ChannelSpec, ...]:
        names = [c.name for c in value]
        dup = {n for n in names if names.count(n) > 1}
        if dup:
            raise ValueError(f"channel names must be unique; repeated: {', '.join(sorted(dup))}")
        return value

    def bind(self, names: list[str]) -> Profile:
        """The profile with an explicit channel list matching the input ``names``.

        Raises :class:`ProfileError` when the profile lists channels that do
        not match the input's columns.
        """
        check_channel_names(names)  # what a profile could not hold, decode would refuse
        if not self.channels:
            return self.model_copy(update={"channels": tuple(ChannelSpec(name=n) for n in names)})
        mine = [c.name for c in self.channels]
        if list(names) != mine:
            raise ProfileError(
                f"the profile's channels ({', '.join(mine)}) do not match the input's "
                f"columns ({', '.join(names)}); give a profile for this input or rename the columns"
            )
        return self

    def override(self, **changes) -> Profile:
        """A copy with the non-None ``changes`` applied and validated."""
        changes = {k: v for k, v in changes.items() if v is not None}
        if not changes:
            return self
        try:
            return Profile.model_validate({**self.model_dump(), **changes})
        except ValidationError as exc:
            raise ProfileError(_describe(exc), "command line") from None


def default_profile() -> Profile:
    """The built-in profile: DCT, N = 64, F = 0.99, mean-removed reference."""
    return Profile()


def profile_id(profile: Profile) -> int:
    """16-bit identifier of the profile's canonical form (SHA-256, first two bytes)."""
    # Settings a frame describes itself (layout version, multi-channel frames)
    # or that only steer the encoder (peak-error limits) stay out of the hash,
    # so profiles written before they existed keep their identifier.  The basis
    # file's path may differ between the two ends; its hash may not.
    canon = profile.model_dump(exclude={"description", "basis_file", "layout_version",
                                        "multi_channel_frames", "windows_per_frame"})
    for ch in canon["channels"]:
        ch.pop("max_error", None)
    if canon["basis_sha256"] is None:
        del canon["basis_sha256"]  # profiles without a trained basis keep their identifier
    else:
        canon["basis_sha256"] = canon["basis_sha256"].lower()
    blob = json.dumps(canon, sort_keys=True, separators=(",", ":")).encode()
    return int.from_bytes(hashlib.sha256(blob).digest()[:2], "big")


#: Largest TOML file read (a profile of 256 channels is about 25 kB).
MAX_TOML_BYTES = 1 << 20
#: Deepest nesting of arrays, inline tables and dotted keys in a TOML file read.
MAX_TOML_DEPTH = 32

_TOKEN = re.compile("\"\"\"|'''|\"|'|#|\n")
_KEY_END = re.compile(r"[^\w.\- \t]")  # what cannot be part of a (dotted) bare key
_HEADER = re.compile(r"^[ \t]*\[\[?[\w.\- \t]*\]", re.MULTILINE)  # [table] or [[array]]
_OPEN_CLOSE = np.zeros(256, dtype=np.int64)
_OPEN_CLOSE[[ord("["), ord("{")]] = 1
_OPEN_CLOSE[[ord("]"), ord("}")]] = -1


def _escaped(text: str, p: int) -> bool:
    """Whether the quote at ``p`` follows an odd run of backslashes."""
    i = p
    while i > 0 and text[i - 1] == "\\":
        i -= 1
    return (p - i) % 2 == 1


def _without_strings(text: str) -> str:
    """``text`` with strings and comments cut out (their brackets and dots are not structure).

    One pass over quote, ``#`` and newline tokens, linear in the text (no
    regular expression that could backtrack over a hostile file).
    """
    keep, state, cut = [], None, 0
    for m in _TOKEN.finditer(text):
        t, p = m.group(), m.start()
        if state is None:
            if t != "\n":
                keep.append(text[cut:p])
                state = t
        elif state == "#":
            if t == "\n":
                state, cut = None, p
        elif t == "\n" and len(state) == 1:  # a one-line string ends here (or is invalid)
            state, cut = None, p
        elif t[0] == state[0] and len(t) >= len(state):
            if state[0] == "'" or not _escaped(text, p):  # literal strings have no escapes
                state, cut = None, p + len(state)
    if state is None:
        keep.append(text[cut:])
    return "".join(keep)


def toml_depth(text: str) -> int:
    """How deep ``text`` nests: brackets and braces open at once, or parts of a dotted key.

    Counted on the text with strings and comments removed, before parsing:
    the standard parser recurses once per level (50 000 levels exhaust the
    stack) and slows down with dotted keys of thousands of parts.
    """
    bare = _without_strings(text)
    marks = _OPEN_CLOSE[np.frombuffer(bare.encode("utf-8"), dtype=np.uint8)]
    brackets = int(np.cumsum(marks).max(initial=0))
    # dotted keys: before an '=' (also inside inline tables) or in a [table.header]
    keys = [_KEY_END.split(piece)[-1] for piece in bare.split("=")[:-1]]
    keys += _HEADER.findall(bare)
    dots = max((k.count(".") for k in keys), default=0)
    return max(brackets, dots + 1)


def loads_toml(text: str, where: str, what: str = "profile") -> dict:
    """Parse TOML ``text`` of a ``what``, size and depth checked first (one sentence on error)."""
    if len(text) > MAX_TOML_BYTES:
        raise ProfileError(f"the {what} has {len(text)} characters, over the {MAX_TOML_BYTES} "
                           "read; is this the right file?", where)
    depth = toml_depth(text)
    if depth > MAX_TOML_DEPTH:
        raise ProfileError(f"the {what} nests {depth} levels deep (arrays, tables or dotted "
                           f"keys), over the {MAX_TOML_DEPTH} read; is this the right file?",
                           where)
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"not valid TOML ({exc})", where) from None


def read_toml(path: str | Path, what: str = "profile") -> dict:
    """Parse a human-written TOML file (a ``what``), naming the file on any error.

    TOML only: nothing in the file is executed and it cannot include other files.
    Files over :data:`MAX_TOML_BYTES` or nested over :data:`MAX_TOML_DEPTH`
    levels are refused before parsing.
    """
    path = Path(path)
    try:
        if path.stat().st_size > 4 * MAX_TOML_BYTES:  # at most 4 UTF-8 bytes per character
            raise ProfileError(f"the {what} file has {path.stat().st_size} bytes, far more "
                               "than a TOML file of settings; is this the right file?",
                               str(path))
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ProfileError(f"no such {what} file; check the path", str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ProfileError(f"cannot read the {what} ({exc.__class__.__name__})",
                           str(path)) from None
    return loads_toml(text, str(path), what)


def load_profile(path: str | Path) -> Profile:
    """Read and validate a TOML profile, naming the file and key on any error."""
    path = Path(path)
    data = read_toml(path)
    data.pop("stream", None)  # the note encode writes beside a stream; not part of a profile
    if isinstance(data.get("basis_file"), str) and not Path(data["basis_file"]).is_absolute():
        data["basis_file"] = str(path.parent / data["basis_file"])  # relative to the profile
    try:
        return Profile.model_validate(data)
    except ValidationError as exc:
        raise ProfileError(_describe(exc), str(path)) from None


class StreamNote(BaseModel):
    """Facts about one coded stream, kept in its ``[stream]`` table beside the profile.

    They are not part of the profile (and not in its identifier): how many
    samples went in, so a decoder knows the stream's true end, and the time
    column of the input when it was evenly spaced.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    samples: int = Field(ge=1)
    time_name: str | None = None
    time_start: float | None = Field(default=None, allow_inf_nan=False)
    time_step: float | None = Field(default=None, allow_inf_nan=False)


#: No frame of any layout is shorter than this many bytes (sync marker, header and
#: CRC; the shortest example in FRAME_LAYOUT.md has 12).
MIN_FRAME_BYTES = 8
#: Time windows one frame carries at most (the windows field of layouts 3 and 4).
MAX_WINDOWS_PER_FRAME = 16


def note_sample_limit(stream_bytes: int, frame_length: int) -> int:
    """The most samples per channel ``stream_bytes`` of frames can carry.

    Every frame has at least :data:`MIN_FRAME_BYTES` bytes and at most
    :data:`MAX_WINDOWS_PER_FRAME` windows of ``frame_length`` samples of every
    channel; a stream note claiming more was edited or belongs to another stream.
    """
    return max(1, int(stream_bytes) // MIN_FRAME_BYTES) * MAX_WINDOWS_PER_FRAME * frame_length


def check_note_fits(note: StreamNote | None, stream_bytes: int, profile: Profile,
                    where: str) -> None:
    """Refuse a stream note whose sample count the stream's bytes cannot carry.

    A decoder fills every sample up to the note's count (lost ones as NaN), so
    an edited ``samples = 1e9`` would otherwise make it allocate without bound.
    """
    if note is None:
        return
    limit = note_sample_limit(stream_bytes, profile.frame_length)
    if note.samples > limit:
        raise ProfileError(
            f"[stream] samples = {note.samples} is more than {stream_bytes} bytes of frames "
            f"can carry (at most {limit} samples of frames of {profile.frame_length}); the "
            "note was edited or belongs to another stream; restore the note written with "
            "the stream", where)


def note_path(stream: str | Path) -> Path:
    """Where the profile of ``stream`` is recorded: ``STREAM.profile.toml``."""
    return Path(f"{stream}.profile.toml")


def load_stream_note(path: str | Path) -> tuple[Profile, StreamNote | None]:
    """The profile and stream note recorded beside a stream."""
    profile = load_profile(path)
    data = read_toml(path)
    if "stream" not in data:
        return profile, None
    try:
        return profile, StreamNote.model_validate(data["stream"])
    except ValidationError as exc:
        raise ProfileError("[stream] " + _describe(exc), str(path)) from None


def save_stream_note(profile: Profile, note: StreamNote, path: str | Path) -> None:
    """Write the profile and the ``[stream]`` note as one TOML file."""
    data = _profile_dict(profile)
    data["stream"] = note.model_dump(exclude_none=True)
    Path(path).write_text(tomli_w.dumps(data), encoding="utf-8")


def _profile_dict(profile: Profile) -> dict:
    data = profile.model_dump(exclude_none=True)
    data["channels"] = [dict(c) for c in data["channels"]]
    return data


def save_profile(profile: Profile, path: str | Path) -> None:
    """Write ``profile`` as TOML (None values omitted)."""
    Path(path).write_text(tomli_w.dumps(_profile_dict(profile)), encoding="utf-8")


def _describe(exc: ValidationError) -> str:
    err = exc.errors()[0]
    key = ".".join(str(p) for p in err["loc"]) or "(top level)"
    if err["type"] == "extra_forbidden":
        return f"unknown key '{key}'; remove it or check its spelling"
    msg = err["msg"].removeprefix("Value error, ")
    if not err["loc"]:
        return msg  # a rule across several keys: the whole input would not help
    got = repr(err.get("input"))
    got = got if len(got) <= 80 else got[:77] + "..."  # a long list would bury the sentence
    return f"key '{key}': {msg} (got {got})"
