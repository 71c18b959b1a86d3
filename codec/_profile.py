"""Profiles: everything both ends of a link must agree on, read from TOML.

A profile fixes the frame length, basis, fidelity target, energy reference and
the channels (name, sensor resolution, raw bits per sample, sample rate).  Its
canonical form is hashed into a 16-bit identifier carried by every frame, so a
decoder refuses frames made under another profile.
"""

from __future__ import annotations

import hashlib
import json
import tomllib
from pathlib import Path
from typing import Literal

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
from ._errors import ProfileError

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
]

#: Channels one stream can carry (the frame header's channel field is 8 bits).
MAX_CHANNELS = 256


class ChannelSpec(BaseModel):
    """One sensor channel.

    ``resolution`` is in the channel's engineering units (e.g. the sensor's
    LSB): the error budget of a frame is never below N * resolution**2 / 12,
    the energy of the sensor's own quantization noise.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    name: str = Field(min_length=1, max_length=64)
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
    windows_per_frame: int = Field(default=16, ge=1, le=16)
    #: What one fidelity budget covers: "window" (each window of each channel on its
    #: own) or "frame" (the windows of one channel that travel in one frame share one
    #: budget; layouts 3 and 4 with several windows per frame).  Only the encoder
    #: reads it: the decoder and the profile identifier do not depend on it.
    fidelity_scope: Literal["window", "frame"] = "frame"
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
                                        "multi_channel_frames", "windows_per_frame",
                                        "fidelity_scope"})
    for ch in canon["channels"]:
        ch.pop("max_error", None)
    if canon["basis_sha256"] is None:
        del canon["basis_sha256"]  # profiles without a trained basis keep their identifier
    else:
        canon["basis_sha256"] = canon["basis_sha256"].lower()
    blob = json.dumps(canon, sort_keys=True, separators=(",", ":")).encode()
    return int.from_bytes(hashlib.sha256(blob).digest()[:2], "big")


def read_toml(path: str | Path, what: str = "profile") -> dict:
    """Parse a human-written TOML file (a ``what``), naming the file on any error.

    TOML only: nothing in the file is executed and it cannot include other files.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ProfileError(f"no such {what} file; check the path", str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ProfileError(f"cannot read the {what} ({exc.__class__.__name__})",
                           str(path)) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"not valid TOML ({exc})", str(path)) from None


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


def note_path(stream: str | Path) -> Path:
    """Where the profile of ``stream`` is recorded: ``STREAM.profile.toml``."""
    return Path(f"{stream}.profile.toml")


def load_stream_note(path: str | Path) -> tuple[Profile, StreamNote | None]:
    """The profile and stream note recorded beside a stream."""
    profile = load_profile(path)
    data = tomllib.loads(Path(path).read_text(encoding="utf-8"))
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
    return f"key '{key}': {msg} (got {err.get('input')!r})"
