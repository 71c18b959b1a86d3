"""A fleet's archive, one file at a time: what each file costs on air at each fidelity.

The unit of work is one recording file: it is read, run through the real
encoder and decoder for every basis x fidelity target (the comparison engine,
:func:`codec.compare_bases`, with every frame's budget checked on the decoded
samples) and turned into rows, one per channel (and ``"all"``) x basis x
fidelity.  :func:`survey_file` is a pure function of the file and the
settings, so it gives the same rows in this process or on any Dask worker; it
holds one file in memory at a time.

Files are named into groups (stations) and periods by a pattern over their
names, such as ``{station}_{date}.csv``; :class:`GroupPattern` reads it.

The link verdict comes through ONE adapter, :func:`link_verdict`, which reads
the link budget of ``link_sim._budget``.
"""

from __future__ import annotations

import glob
import hashlib
import json
import re
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from codec import (
    CoefwireError,
    InputError,
    Profile,
    SampleTable,
    as_basis,
    basis_names,
    compare_bases,
    read_samples,
)

from ._budget import SECONDS_PER_DAY, Budget, judge_stream

__all__ = [
    "SUFFIXES",
    "ROW_KEYS",
    "PERIOD_FIELDS",
    "SurveySettings",
    "GroupPattern",
    "ArchiveFile",
    "LinkVerdict",
    "link_verdict",
    "expand_archive",
    "read_recording",
    "resolve_survey_bases",
    "survey_file",
    "error_row",
]

#: Recording files a survey reads.
SUFFIXES = (".csv", ".npy", ".parquet")
#: Pattern fields that name the period a file covers; every other field names its group.
PERIOD_FIELDS = ("date", "day", "period", "time", "start", "week", "month", "hour")
#: Seconds per day, the unit of every "bits per day" figure.
DAY_S = SECONDS_PER_DAY

#: Keys of every survey row, in table order (one row per file x channel x basis x fidelity;
#: a file that failed has one row with ``error`` set and the figures empty).
ROW_KEYS = (
    "file", "group", "period", "channel", "basis", "fidelity_target", "samples",
    "duration_s", "sample_rate_hz", "bits", "bits_per_sample", "bits_per_day",
    "bits_per_frame_mean", "bits_per_frame_p95", "compression_ratio", "bits_saved_percent",
    "fidelity_min", "fidelity_mean", "frames_below_target", "frames_at_floor", "snr_db",
    "prd_percent", "max_abs_error", "winner", "error",
)


@dataclass(frozen=True)
class SurveySettings:
    """What every task needs besides its file: the profile and what to try.

    ``profile`` is the profile as a plain dict (``Profile.model_dump()``), so
    the settings pickle small and hash the same everywhere.

    Parameters
    ----------
    profile : dict
        ``Profile.model_dump()`` of the profile every file is coded with.
    bases : tuple of str
        Bases to score (:func:`resolve_survey_bases`).
    fidelities : tuple of float
        Fidelity targets.
    group_by : str, optional
        The file-name pattern the archive was grouped by.

    Examples
    --------
    >>> import codec
    >>> s = SurveySettings(codec.default_profile().model_dump(), ("identity", "dct"), (0.99,))
    >>> t = SurveySettings(codec.default_profile().model_dump(), ("identity", "dct"), (0.95,))
    >>> len(s.fingerprint()), s.fingerprint() == t.fingerprint()
    (64, False)
    """

    profile: dict
    bases: tuple[str, ...]
    fidelities: tuple[float, ...]
    group_by: str | None = None

    def fingerprint(self) -> str:
        """SHA-256 of the settings: a resumed survey must use the same ones."""
        text = json.dumps(asdict(self), sort_keys=True, default=str)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class ArchiveFile:
    """One recording of the archive and the group and period its name gives."""

    path: str
    group: str
    period: str

    def key(self, fingerprint: str) -> str:
        """Names this file's result: the settings, the file's resolved path, size and mtime.

        A file changed since it was surveyed gets a new key, so --resume redoes it.
        """
        p = Path(self.path).resolve()
        try:
            st = p.stat()
            stamp = f"{st.st_size}:{st.st_mtime_ns}"
        except OSError:
            stamp = "missing"
        text = f"{fingerprint}\n{p}\n{stamp}"
        return hashlib.sha256(text.encode("utf-8")).hexdigest()[:24]


class GroupPattern:
    """A pattern over file names such as ``{station}_{date}.csv``.

    Fields in braces match any run of characters (shortest first) and ``*``
    matches anything.  Fields named like a period (:data:`PERIOD_FIELDS`)
    give the period a file covers; the other fields, joined by ``_``, name
    its group.
    """

    def __init__(self, pattern: str):
        fields = re.findall(r"{([^{}]*)}", pattern)
        if not fields:
            raise InputError(f"--group-by {pattern!r} has no field in braces; give e.g. "
                             "'{station}_{date}.csv'", "command line")
        for f in fields:
            if not f.isidentifier():
                raise InputError(f"--group-by field {{{f}}} is not a plain name; use letters, "
                                 "digits and _ such as {station}", "command line")
        if len(set(fields)) != len(fields):
            raise InputError(f"--group-by {pattern!r} names a field twice; name each once",
                             "command line")
        self.group_fields = [f for f in fields if f not in PERIOD_FIELDS]
        self.period_fields = [f for f in fields if f in PERIOD_FIELDS]
        if not self.group_fields:
            raise InputError(f"--group-by {pattern!r} has only period fields "
                             f"({', '.join(fields)}); add one that names the group, such as "
                             "{station}", "command line")
        regex = ""
        for part in re.split(r"({[^{}]*}|\*)", pattern):
            if part == "*":
                regex += ".*?"
            elif part.startswith("{") and part.endswith("}"):
                regex += f"(?P<{part[1:-1]}>.+?)"
            else:
                regex += re.escape(part)
        self.pattern = pattern
        self._regex = re.compile(regex)

    def match(self, path: str) -> tuple[str, str]:
        """(group, period) of the file at ``path``, from its name."""
        name = Path(path).name
        m = self._regex.fullmatch(name)
        if m is None:
            raise InputError(f"the file name {name!r} does not match --group-by "
                             f"{self.pattern!r}; fix the pattern or leave the file out", path)
        group = "_".join(m.group(f) for f in self.group_fields)
        period = "_".join(m.group(f) for f in self.period_fields) or Path(path).stem
        return group, period


def expand_archive(items: list[str], group_by: str | None) -> list[ArchiveFile]:
    """Files named by ``items`` (files, folders or globs), sorted, with group and period.

    Without a pattern every file belongs to the group ``archive`` and its period
    is its name without suffix.

    Parameters
    ----------
    items : list of str
        Files, folders (searched recursively) or glob patterns.
    group_by : str, optional
        A file-name pattern such as ``{station}_{date}.csv``.

    Returns
    -------
    list of ArchiveFile
        Path, group and period of every ``.csv``, ``.npy`` or ``.parquet`` file.

    Raises
    ------
    InputError
        For a pattern that matches nothing, a missing file or an empty archive.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     for name in ("north_2026-01-02.csv", "north_2026-01-01.csv", "south_2026-01-01.csv"):
    ...         _ = (pathlib.Path(d) / name).write_text("v\\n1\\n")
    ...     items = expand_archive([d], "{station}_{date}.csv")
    >>> [(i.group, i.period) for i in items]
    [('north', '2026-01-01'), ('north', '2026-01-02'), ('south', '2026-01-01')]
    """
    pattern = GroupPattern(group_by) if group_by else None
    paths: list[str] = []
    for item in items:
        if any(c in item for c in "*?["):
            found = sorted(glob.glob(item))
            if not found:
                raise InputError("no file matches this pattern; check the path", item)
            paths += [p for p in found if Path(p).suffix.lower() in SUFFIXES
                      and Path(p).is_file()]
        elif Path(item).is_dir():
            paths += sorted(str(p) for p in Path(item).rglob("*")
                            if p.suffix.lower() in SUFFIXES and p.is_file())
        else:
            if Path(item).suffix.lower() not in SUFFIXES:
                raise InputError("a survey reads .csv, .npy and .parquet files; give those",
                                 item)
            if not Path(item).is_file():
                raise InputError("no such file; check the path", item)
            paths.append(item)
    paths = sorted(dict.fromkeys(paths))
    if not paths:
        raise InputError("the archive holds no .csv, .npy or .parquet file; check the paths",
                         " ".join(items))
    out = []
    for p in paths:
        group, period = pattern.match(p) if pattern else ("archive", Path(p).stem)
        out.append(ArchiveFile(p, group, period))
    return out


def read_recording(path: str | Path) -> SampleTable:
    """Read a .csv, .npy or .parquet recording (a ``time``/``t`` column is kept apart).

    Parquet columns must be numeric; nulls are refused like NaN in CSV.
    """
    path = Path(path)
    if path.suffix.lower() != ".parquet":
        return read_samples(path)
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        table = pq.read_table(path)
    except (OSError, pa.ArrowException) as exc:
        raise InputError(f"not a readable Parquet file ({exc.__class__.__name__})",
                         str(path)) from None
    names = list(table.column_names)
    if table.num_rows == 0 or not names:
        raise InputError("the Parquet file has no rows or no columns", str(path))
    cols = []
    for name in names:
        col = table.column(name)
        if not (pa.types.is_integer(col.type) or pa.types.is_floating(col.type)):
            raise InputError(f"column '{name}' is {col.type}, not numbers; keep only numeric "
                             "columns", str(path))
        if col.null_count:
            raise InputError(f"column '{name}' has {col.null_count} empty values; fill or "
                             "remove the gaps before coding", str(path))
        cols.append(col.to_numpy().astype(np.float64))
    values = np.column_stack(cols)
    time = None
    time_name = "time"
    if names[0].lower() in ("time", "t") and len(names) > 1:
        time, time_name = values[:, 0].copy(), names[0]
        values, names = values[:, 1:], names[1:]
    bad = ~np.isfinite(values)
    if bad.any():
        row, col = np.argwhere(bad)[0]
        raise InputError(f"row {row}, column '{names[col]}': value is {values[row, col]}; "
                         "fill or remove the gaps before coding", str(path))
    return SampleTable(np.ascontiguousarray(values), names, time, time_name)


def resolve_survey_bases(spec: str, frame_length: int) -> tuple[str, ...]:
    """Basis names from ``"all"`` or ``"a,b,c"``; ``identity`` is always scored.

    A survey scores fixed bases only: a trained basis (klt) would be fitted on
    each file separately, which is not a profile one can ship.

    Parameters
    ----------
    spec : str
        ``"all"`` or comma-separated names.
    frame_length : int
        Frame length; ``all`` skips bases that cannot use it.

    Returns
    -------
    tuple of str
        The names, ``identity`` first.

    Raises
    ------
    InputError
        For an unknown or unfit name, or ``klt``.

    Examples
    --------
    >>> resolve_survey_bases("dct, haar", 32)
    ('identity', 'dct', 'haar')
    >>> "klt" in resolve_survey_bases("all", 32), "db10" in resolve_survey_bases("all", 32)
    (False, False)
    """
    if spec.strip() == "all":
        names = []
        for name in basis_names():
            if name == "klt":
                continue
            try:
                as_basis(name, frame_length)
            except InputError:
                continue  # "all" means all that fit the frame length
            names.append(name)
    else:
        names = [s.strip() for s in spec.split(",") if s.strip()]
        if not names:
            raise InputError("no basis named; give --bases a,b,... or all", "command line")
        for name in names:
            if name == "klt":
                raise InputError("a survey compares fixed bases; train a basis with 'coefwire "
                                 "train' and survey with that profile instead of --bases klt",
                                 "command line")
            as_basis(name, frame_length)  # a clear InputError for unknown or unfit names
    names = list(dict.fromkeys(names))
    if "identity" not in names:
        names = ["identity"] + names
    return tuple(names)


def _sample_rate_hz(profile: Profile, table: SampleTable, path: str) -> float:
    """Rows per second: the profile's channels, else the file's time column."""
    rates = {c.sample_rate_hz for c in profile.channels if c.sample_rate_hz is not None}
    if len(rates) > 1:
        raise InputError("the profile's channels give different sample_rate_hz values; a "
                         "survey needs one row rate, so give them all the same", path)
    if rates:
        return float(rates.pop())
    t = table.time
    if t is not None and t.size >= 2:
        span = float(t[-1] - t[0])
        if span > 0 and np.all(np.diff(t) > 0):
            return (t.size - 1) / span
        raise InputError("the time column does not increase, so it gives no sample rate; "
                         "set sample_rate_hz in the profile's channels", path)
    raise InputError("the sample rate is unknown: set sample_rate_hz in the profile's "
                     "channels or add a time column", path)


def error_row(item: ArchiveFile, message: str) -> dict:
    """The one row of a file that failed: its names and the sentence saying why."""
    row = dict.fromkeys(ROW_KEYS)
    row.update(file=item.path, group=item.group, period=item.period, error=message)
    return row


def survey_file(item: ArchiveFile, settings: SurveySettings) -> list[dict]:
    """Rows of one file: every channel (and ``all``) x basis x fidelity, or one error row.

    A file the user can fix (unreadable, wrong columns, NaN, too short) gives
    an error row with the one-sentence reason; anything else is our bug and
    propagates.
    """
    try:
        table = read_recording(item.path)
        profile = Profile.model_validate(settings.profile).bind(table.names)
        rate_hz = _sample_rate_hz(profile, table, item.path)
        cmp = compare_bases(table.values, profile, list(settings.bases),
                            list(settings.fidelities), train_fraction=0.0, names=table.names,
                            input_name=Path(item.path).name)
    except (CoefwireError, OSError) as exc:
        return [error_row(item, str(exc))]
    samples, width = table.values.shape
    duration = samples / rate_hz
    rows = []
    for r in cmp.rows:
        count = samples * (width if r["channel"] == "all" else 1)
        bits = float(r["bits_per_sample"]) * count
        row = {k: r.get(k) for k in ROW_KEYS}
        row.update(file=item.path, group=item.group, period=item.period, samples=samples,
                   duration_s=duration, sample_rate_hz=rate_hz, bits=bits,
                   bits_per_day=bits / duration * DAY_S, error=None)
        for k in ("bits_per_sample", "compression_ratio", "bits_saved_percent"):
            row[k] = None if row[k] is None else float(row[k])
        rows.append(row)
    return rows


@dataclass(frozen=True)
class LinkVerdict:
    """Whether a stream of ``stream_bps`` fits a link, and what limits it when not.

    ``limited_by`` is ``"rate"`` (the stream's bits on air exceed the radio's),
    ``"margin"`` (the radio's own rate misses the required margin),
    ``"pass_volume"`` (an orbit's passes cannot carry one orbit's data) or None.
    """

    fits: bool
    limited_by: str | None
    stream_bps: float
    on_air_bps: float
    data_rate_bps: float
    channel_bit_rate_bps: float
    margin_db: float
    required_margin_db: float


def link_verdict(budget: Budget, stream_bps: float) -> LinkVerdict:
    """The budget's verdict on a stream of ``stream_bps`` information bits per second.

    The one adapter between the survey and the link budget: it asks
    :func:`link_sim._budget.judge_stream`, the verdict the ``budget`` command
    gives (the radio's rate carries the stream on air, the margin at that rate
    holds, and for an orbit one orbit's data fits in its passes), and keeps
    the first condition that fails as ``limited_by``.
    """
    fig = budget.figures
    fit = judge_stream(budget, float(stream_bps))
    return LinkVerdict(fit.fits, fit.limited_by, float(stream_bps), fit.on_air_bps,
                       float(fig["data_rate_bps"]), fit.radio_on_air_bps,
                       fit.margin_db, fit.required_margin_db)
