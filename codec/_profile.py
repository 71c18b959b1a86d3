"""Profiles: everything both ends of a link must agree on, read from TOML.

A profile fixes the frame length, basis, fidelity target, energy reference and
the channels (name, sensor resolution, raw bits per sample, sample rate).  Its
canonical form is hashed into a 16-bit identifier carried by every frame, so a
decoder refuses frames made under another profile.
"""

from __future__ import annotations

import hashlib
import json
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

from ._errors import InputError, ProfileError
from ._toml import MAX_TOML_BYTES, MAX_TOML_DEPTH, loads_toml, read_toml, toml_depth
from .transform.bases import MAX_FRAME_LENGTH, as_basis, basis_fingerprint, basis_names

__all__ = [
    "ChannelSpec",
    "Profile",
    "default_profile",
    "load_profile",
    "save_profile",
    "profile_id",
    "profile_digest",
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
    "MULTI_FRAMES_FROM_LAYOUT",
    "note_sample_limit",
    "check_note_fits",
    "MAX_NAME_CHARS",
    "check_channel_names",
    "stream_basis_fingerprint",
]

#: Channels one stream can carry (the frame header's channel field is 8 bits).
MAX_CHANNELS = 256


#: Characters a channel name may have.
MAX_NAME_CHARS = 64
#: Time windows one frame carries at most (the windows field of layouts 3 to 7).
MAX_WINDOWS_PER_FRAME = 16
#: The first layout whose frames carry every channel unless a profile says otherwise.
MULTI_FRAMES_FROM_LAYOUT = 7


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

    Parameters
    ----------
    name : str
        Column name, 1 to 64 characters.
    resolution : float
        Sensor resolution (LSB) in engineering units; 0: none known.
    raw_bits_per_sample : int
        Bits the raw sensor value takes (1-64), the baseline of compression ratios.
    sample_rate_hz : float, optional
        Samples per second, for time axes and rates.
    valid_min, valid_max : float, optional
        Plausible range; decoded values outside are flagged.
    max_error : float, optional
        Peak-error limit in engineering units.
    unit : str, optional
        Engineering unit printed beside figures.

    Examples
    --------
    >>> c = ChannelSpec(name="cell_temp", resolution=0.0625, unit="K")
    >>> c.raw_bits_per_sample, c.unit
    (16, 'K')
    >>> import pydantic
    >>> try:
    ...     ChannelSpec(name="cell_temp", resolution=-1.0)
    ... except pydantic.ValidationError as e:
    ...     print(e.errors()[0]["loc"], e.errors()[0]["type"])
    ('resolution',) greater_than_equal
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
    #: Engineering unit of the channel's values ("K", "m/s²", "°C", "W/m²"): printed
    #: beside every figure in the channel's units; JSON keeps the numbers as they are.
    unit: str | None = Field(default=None, min_length=1, max_length=24,
                             pattern=r"^[^\x00-\x1f\x7f]+$")


class Profile(BaseModel):
    """Codec settings shared by encoder and decoder.

    With no ``channels`` the profile applies to every input column with the
    channel defaults; :meth:`bind` makes the channel list explicit.

    Parameters
    ----------
    description : str
        Free text for people; not part of the identifier.
    frame_length : int
        Samples per frame N, 2 to 4096.
    basis : str
        A registered basis name (:func:`codec.basis_names`).
    fidelity : float
        Fraction of each frame's energy (about its mean with reference ``ac``)
        the decoded frame keeps, 0 to 1.
    reference : {"ac", "total"}
        Energy the fidelity is a fraction of.
    layout_version : {1, 2, 3, 4, 5, 6, 7}
        Frame layout the encoder writes (7, the default: see the field's comment).
    multi_channel_frames : bool or None
        Layouts 2 to 7: one frame carries all channels of its time windows; None (the
        default): from layout 7 on (:attr:`multi_frames`).
    windows_per_frame : int
        Layouts 3 to 7: time windows per frame, 1 to 16.
    fidelity_scope : {"frame", "window"}
        What one fidelity budget covers.
    channels : tuple of ChannelSpec
        The channels, in column order (empty: every column, defaults).
    basis_file, basis_sha256 : str, optional
        A trained basis (``basis = "klt"``): its file and the SHA-256 of its matrix.

    Examples
    --------
    >>> p = Profile(frame_length=32, fidelity=0.95).bind(["x", "y"])
    >>> [c.name for c in p.channels], p.basis
    (['x', 'y'], 'dct')
    >>> p.bind(["x", "z"])
    Traceback (most recent call last):
    ...
    codec._errors.ProfileError: the profile's channels (x, y) do not match the input's ...
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    description: str = ""
    frame_length: int = Field(default=64, ge=2, le=MAX_FRAME_LENGTH)
    basis: str = "dct"
    #: 0 means no energy target (a peak-error limit alone then sets the quality).
    fidelity: float = Field(default=0.99, ge=0.0, le=1.0)
    reference: Literal["total", "ac"] = "ac"
    #: Frame layout the encoder writes (the decoder reads every version); 4 is 3 with
    #: dependent (trellis-coded) quantization, 5 is 3 with long-term prediction inside a
    #: frame, 6 is 5 with a choice of the Haar basis per channel and frame, 7 (the default)
    #: is 6 with a flag per channel and frame dropping the count fields and a range-coded
    #: string per channel of a multi-channel frame (measured on real recordings: README,
    #: "Bits on real recordings").  Any registered layout
    #: (``codec.layouts.registry.register_layout``); built in: 1 to 7.
    layout_version: int = 7
    #: Layouts 2 to 7: one frame (one header) carries all channels of its time windows.
    #: Unset (the default): the layout's choice, multi-channel frames from layout 7 on
    #: and single-channel frames before (as those layouts always had), read through
    #: :attr:`multi_frames`.  From layout 7 on the header is paid once for every channel,
    #: which real multi-channel recordings need to beat differenced zstd; the price is
    #: that a lost frame loses every channel of its windows (README, "Frame layouts").
    multi_channel_frames: bool | None = None
    #: Layouts 3 to 7: consecutive time windows one frame carries (1 to 16); more
    #: windows share one header but a lost frame loses them all.
    windows_per_frame: int = Field(default=16, ge=1, le=MAX_WINDOWS_PER_FRAME)
    #: What one fidelity budget covers: "window" (each window of each channel on its
    #: own) or "frame" (the windows of one channel that travel in one frame share one
    #: budget; layouts 3 to 7 with several windows per frame).  Only the encoder
    #: reads it and the profile identifier leaves it out, but the CRC key
    #: (:func:`profile_digest`) holds it: a decoder needs the encoder's value.
    fidelity_scope: Literal["window", "frame"] = "frame"
    channels: tuple[ChannelSpec, ...] = Field(default=(), max_length=MAX_CHANNELS)
    #: A trained basis (basis = "klt"): its .cwbasis.npz file and the SHA-256 of its matrix.
    basis_file: str | None = None
    basis_sha256: str | None = Field(default=None, pattern=r"^[0-9a-fA-F]{64}$")

    @property
    def multi_frames(self) -> bool:
        """Whether the encoder puts every channel in each frame.

        ``multi_channel_frames`` when set; unset, the layout's choice: from layout
        7 on (its frames carry a range-coded string per channel).

        Examples
        --------
        >>> Profile().multi_frames, Profile(layout_version=6).multi_frames
        (True, False)
        >>> Profile(multi_channel_frames=False).multi_frames
        False
        """
        if self.multi_channel_frames is not None:
            return self.multi_channel_frames
        return self.layout_version >= MULTI_FRAMES_FROM_LAYOUT

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

    @field_validator("layout_version")
    @classmethod
    def _known_layout(cls, value: int) -> int:
        from .layouts.registry import layouts

        known = [lay.version for lay in layouts()]
        if value not in known:
            raise ValueError(f"unknown frame layout {value}; choose one of: "
                             f"{', '.join(map(str, known))}")
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
    """The built-in profile: DCT, N = 64, F = 0.99, mean-removed reference.

    Returns
    -------
    Profile
        ``Profile()`` with every default.

    Examples
    --------
    >>> p = default_profile()
    >>> p.basis, p.frame_length, p.fidelity, p.reference, p.layout_version
    ('dct', 64, 0.99, 'ac', 7)
    """
    return Profile()


def profile_id(profile: Profile) -> int:
    """16-bit identifier of the profile's canonical form (SHA-256, first two bytes).

    Parameters
    ----------
    profile : Profile
        The profile.

    Returns
    -------
    int
        0 to 65535; every frame carries it (or its low byte).

    Examples
    --------
    Settings that frames describe themselves, and text for people, leave the
    identifier alone; settings both ends must share change it:

    >>> p = default_profile()
    >>> profile_id(p) == profile_id(p.model_copy(update={"description": "spare"}))
    True
    >>> profile_id(p) == profile_id(p.model_copy(update={"layout_version": 1}))
    True
    >>> profile_id(p) == profile_id(p.model_copy(update={"fidelity": 0.95}))
    False
    """
    # The unit is a label for people and the budget scope steers only the encoder:
    # profiles that add them keep their identifier.
    blob = _canonical(profile, ("fidelity_scope",), ("max_error", "unit"))
    return int.from_bytes(hashlib.sha256(blob).digest()[:2], "big")


def _canonical(profile: Profile, exclude: tuple[str, ...] = (),
               channel_exclude: tuple[str, ...] = ("max_error",)) -> bytes:
    """The canonical JSON of ``profile`` that :func:`profile_id` and :func:`profile_digest` hash.

    Settings a frame describes itself (layout version, multi-channel frames,
    windows per frame) or that only steer the encoder (peak-error limits) stay
    out, so profiles written before they existed keep their hash; so do the
    description and the basis file's path, which may differ between the two
    ends (the basis's hash may not).  ``exclude`` and ``channel_exclude`` name
    further top-level and per-channel keys to leave out.
    """
    canon = profile.model_dump(exclude={"description", "basis_file", "layout_version",
                                        "multi_channel_frames", "windows_per_frame", *exclude})
    for ch in canon["channels"]:
        for key in channel_exclude:
            ch.pop(key, None)
    if canon["basis_sha256"] is None:
        del canon["basis_sha256"]  # profiles without a trained basis keep their hash
    else:
        canon["basis_sha256"] = canon["basis_sha256"].lower()
    return json.dumps(canon, sort_keys=True, separators=(",", ":")).encode()


def profile_digest(profile: Profile, fingerprint: str) -> bytes:
    """32-byte digest of everything both ends must share: the profile and its basis.

    SHA-256 of the canonical form :func:`profile_id` hashes, except that the
    budget scope and the channels' units stay in (so a decoder must be given
    them as the encoder had them), followed by the basis fingerprint
    (:func:`codec.transform.bases.basis_fingerprint` of the matrix the profile builds),
    so two ends whose bases differ by more than rounding get different
    digests.  Frames carry it implicitly in their CRC (``FRAME_LAYOUT.md``,
    "Profile check"), never on the wire.
    """
    blob = _canonical(profile)
    return hashlib.sha256(b"coefwire profile digest\0" + blob + b"\0"
                          + fingerprint.lower().encode()).digest()


def load_profile(path: str | Path) -> Profile:
    """Read and validate a TOML profile, naming the file and key on any error.

    Parameters
    ----------
    path : str or Path
        The TOML file; a relative ``basis_file`` in it is relative to the file.

    Returns
    -------
    Profile
        The validated profile (a ``[stream]`` table, if any, is ignored).

    Raises
    ------
    ProfileError
        Naming the file and the key, for unreadable TOML, unknown keys or
        impossible values.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     path = pathlib.Path(d) / "p.toml"
    ...     _ = path.write_text('frame_length = 32\\nfidelity = 1.5\\n')
    ...     try:
    ...         load_profile(path)
    ...     except ProfileError as e:
    ...         print(e.message)
    key 'fidelity': Input should be less than or equal to 1 (got 1.5)

    See :func:`save_profile` for a round trip.
    """
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

    Parameters
    ----------
    samples : int
        Samples per channel that went into the encoder.
    time_name, time_start, time_step : optional
        The input's time column: its name, and its start and step when evenly spaced.
    time_decimals, time_start_ticks, time_step_ticks, time_ticks, time_float64 : optional
        The time column kept exactly (see ``codec/_timecol.py``).
    stuffing : {"slip", "cobs"}, optional
        Byte stuffing of the stream's frames.
    basis_fingerprint : str, optional
        :func:`codec.basis_fingerprint` of the basis the encoding machine built.

    Examples
    --------
    >>> StreamNote(samples=1000, stuffing="cobs").model_dump(exclude_none=True)
    {'samples': 1000, 'stuffing': 'cobs'}
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    samples: int = Field(ge=1)
    time_name: str | None = None
    time_start: float | None = Field(default=None, allow_inf_nan=False)
    time_step: float | None = Field(default=None, allow_inf_nan=False)
    #: The time column kept exactly (see ``codec/_timecol.py``): integer ticks of
    #: 10**-time_decimals, regular (start + step) or listed (zlib + base64 of the tick
    #: differences); ``time_float64`` holds the raw values of a column with no decimal clock.
    time_decimals: int | None = Field(default=None, ge=0, le=15)
    time_start_ticks: int | None = None
    time_step_ticks: int | None = None
    time_ticks: str | None = None
    time_float64: str | None = None
    #: Byte stuffing of the stream's frames for serial modems ("slip", "cobs"); absent: none.
    #: ``decode`` and ``inspect`` undo it without being told.
    stuffing: Literal["slip", "cobs"] | None = None
    #: :func:`codec.basis_fingerprint` of the built-in basis as the encoding machine built
    #: it; a machine that builds another matrix refuses the stream (notes without it pass).
    basis_fingerprint: str | None = Field(default=None, pattern=r"^[0-9a-f]{64}$")


#: No frame of any layout is shorter than this many bytes (sync marker, header and
#: CRC; the shortest example in FRAME_LAYOUT.md has 12).
MIN_FRAME_BYTES = 8


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


def stream_basis_fingerprint(profile: Profile) -> str | None:
    """Fingerprint of the profile's basis as this machine builds it (None for a trained basis,
    whose file is already checked by its SHA-256)."""
    if profile.basis == "klt":
        return None
    return basis_fingerprint(as_basis(profile.basis, profile.frame_length).matrix)


def _check_basis_fingerprint(profile: Profile, note: StreamNote, path: str | Path) -> None:
    recorded = note.basis_fingerprint
    here = stream_basis_fingerprint(profile)
    if recorded is None or here is None or recorded == here:
        return
    raise ProfileError(
        f"the basis {profile.basis!r} at N = {profile.frame_length} that this machine builds "
        f"(fingerprint {here[:12]}) differs from the one the stream was encoded with "
        f"({recorded[:12]}), so its samples would decode wrong; decode with a coefwire "
        "version that builds the same basis, or re-encode the source on this machine",
        str(path))


def note_path(stream: str | Path) -> Path:
    """Where the profile of ``stream`` is recorded: ``STREAM.profile.toml``."""
    return Path(f"{stream}.profile.toml")


def load_stream_note(path: str | Path) -> tuple[Profile, StreamNote | None]:
    """The profile and stream note recorded beside a stream.

    Parameters
    ----------
    path : str or Path
        The TOML file written beside the stream (``STREAM.profile.toml``).

    Returns
    -------
    (Profile, StreamNote or None)
        The profile, and the ``[stream]`` note when the file has one.

    Raises
    ------
    ProfileError
        For a bad profile or note, or when the note records a basis
        fingerprint that differs from the basis this machine builds.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     path = pathlib.Path(d) / "run.cw.profile.toml"
    ...     save_stream_note(default_profile(), StreamNote(samples=640), path)
    ...     profile, note = load_stream_note(path)
    ...     save_profile(profile, path)  # a plain profile has no note
    ...     plain = load_stream_note(path)
    >>> profile == default_profile(), note.samples, plain[1]
    (True, 640, None)
    """
    profile = load_profile(path)
    data = read_toml(path)
    if "stream" not in data:
        return profile, None
    try:
        note = StreamNote.model_validate(data["stream"])
    except ValidationError as exc:
        raise ProfileError("[stream] " + _describe(exc), str(path)) from None
    _check_basis_fingerprint(profile, note, path)
    return profile, note


def save_stream_note(profile: Profile, note: StreamNote, path: str | Path) -> None:
    """Write the profile and the ``[stream]`` note as one TOML file.

    The note records the fingerprint of the basis as this machine built it.
    """
    data = _profile_dict(profile)
    note = note.model_copy(update={"basis_fingerprint": stream_basis_fingerprint(profile)})
    data["stream"] = note.model_dump(exclude_none=True)
    Path(path).write_text(tomli_w.dumps(data), encoding="utf-8")


def _profile_dict(profile: Profile) -> dict:
    data = profile.model_dump(exclude_none=True)
    data["channels"] = [dict(c) for c in data["channels"]]
    return data


def save_profile(profile: Profile, path: str | Path) -> None:
    """Write ``profile`` as TOML (None values omitted).

    Parameters
    ----------
    profile : Profile
        The profile.
    path : str or Path
        The file to write.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> p = Profile(frame_length=16, channels=(ChannelSpec(name="v", resolution=0.5),))
    >>> with tempfile.TemporaryDirectory() as d:
    ...     save_profile(p, pathlib.Path(d) / "p.toml")
    ...     back = load_profile(pathlib.Path(d) / "p.toml")
    >>> back == p
    True
    """
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
