"""Reading and writing sample files (.csv, .npy) and writing outputs atomically.

CSV: a header row of channel names; an optional first column named ``time`` or
``t`` is carried through unchanged.  NPY: a 2-D float array, samples x channels.
Every output is written to a temporary file beside its target and renamed into
place only when complete, so a failed run never leaves a partial file.
"""

from __future__ import annotations

import contextlib
import csv
import io
import os
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._errors import InputError

__all__ = ["SampleTable", "read_samples", "write_samples", "atomic_output"]

_TIME_NAMES = ("time", "t")


@dataclass
class SampleTable:
    """Samples with their channel names and optional time column."""

    values: np.ndarray
    names: list[str]
    time: np.ndarray | None = None
    time_name: str = "time"


def read_samples(path: str | Path) -> SampleTable:
    """Read a .csv or .npy sample file, naming the row and column of any bad value."""
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".csv", ".npy"):
        raise InputError("unknown file type; give a .csv or .npy file", str(path))
    if not path.is_file():
        raise InputError("no such file; check the path", str(path))
    return _read_csv(path) if suffix == ".csv" else _read_npy(path)


def _read_npy(path: Path) -> SampleTable:
    try:
        arr = np.load(path, allow_pickle=False)
    except (ValueError, OSError, EOFError) as exc:
        raise InputError(f"not a readable .npy array ({exc})", str(path)) from None
    if arr.ndim != 2 or not (np.issubdtype(arr.dtype, np.floating)
                             or np.issubdtype(arr.dtype, np.integer)):
        raise InputError(
            f"expected a 2-D numeric array (samples x channels), got shape {arr.shape} "
            f"of {arr.dtype}", str(path))
    if arr.size == 0:
        raise InputError("the array is empty; give at least one sample", str(path))
    values = arr.astype(np.float64)
    _check_finite(values, path, [f"ch{i}" for i in range(values.shape[1])], line_offset=None)
    return SampleTable(values, [f"ch{i}" for i in range(values.shape[1])])


def _read_csv(path: Path) -> SampleTable:
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the file as UTF-8 text ({exc.__class__.__name__})",
                         str(path)) from None
    rows = [r for r in csv.reader(io.StringIO(text)) if r and any(c.strip() for c in r)]
    if not rows:
        raise InputError("the file is empty; give a header row and data rows", str(path))
    header = [h.strip() for h in rows[0]]
    body = rows[1:]
    if not body:
        raise InputError("there are no data rows under the header", str(path))
    if any(not h for h in header):
        raise InputError("the header row has an empty column name", str(path))
    width = len(header)
    for i, row in enumerate(body):
        if len(row) != width:
            raise InputError(
                f"line {i + 2} has {len(row)} columns but the header has {width}; "
                "every row needs one value per column", str(path))
    try:
        values = np.array(body, dtype=np.float64)
    except ValueError:
        for i, row in enumerate(body):
            for j, cell in enumerate(row):
                try:
                    float(cell)
                except ValueError:
                    raise InputError(
                        f"line {i + 2}, column '{header[j]}': {cell.strip()!r} is not a number",
                        str(path)) from None
        raise  # unreachable: numpy and float() disagree, which would be our bug
    time = None
    time_name = "time"
    if header[0].lower() in _TIME_NAMES and width > 1:
        time, time_name = values[:, 0].copy(), header[0]
        values, header = values[:, 1:], header[1:]
    _check_finite(values, path, header, line_offset=2)
    return SampleTable(np.ascontiguousarray(values), header, time, time_name)


def _check_finite(values: np.ndarray, path: Path, names: list[str], line_offset: int | None):
    bad = ~np.isfinite(values)
    if bad.any():
        row, col = np.argwhere(bad)[0]
        where = (f"line {row + line_offset}, column '{names[col]}'" if line_offset is not None
                 else f"sample {row}, channel {col}")
        raise InputError(
            f"{where}: value is {values[row, col]} ({int(bad.sum())} non-finite values in all); "
            "fill or remove the gaps before coding", str(path))


def write_samples(path: str | Path, table: SampleTable) -> None:
    """Write samples as .csv (with header and time column if any) or .npy, atomically."""
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".csv", ".npy"):
        raise InputError("unknown output type; name a .csv or .npy file", str(path))
    with atomic_output(path) as tmp:
        if suffix == ".npy":
            with open(tmp, "wb") as fh:
                np.save(fh, table.values)
            return
        cols = table.values
        names = list(table.names)
        if table.time is not None:
            cols = np.column_stack([table.time, cols])
            names = [table.time_name] + names
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(",".join(names) + "\n")
            np.savetxt(fh, cols, delimiter=",", fmt="%.17g")


@contextlib.contextmanager
def atomic_output(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it into place on success only."""
    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    if not directory.is_dir():
        raise InputError("the output folder does not exist; create it first", str(path))
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=directory)
    os.close(fd)
    # mkstemp creates the file private (0600); give it the mode a plain open() would.
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
