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
import sys
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._errors import InputError

__all__ = ["SampleTable", "read_samples", "write_samples", "atomic_output", "STDIO", "is_stdio",
           "CsvBlockReader", "write_csv_block", "csv_decimals", "sample_suffix"]

_TIME_NAMES = ("time", "t")


@dataclass
class SampleTable:
    """Samples with their channel names and optional time column.

    Attributes
    ----------
    values : ndarray, shape (samples, channels)
        float64 samples; NaN marks a gap where gaps are allowed.
    names : list of str
        Channel names, one per column.
    time : ndarray, optional
        The time column, carried through unchanged.
    time_name : str
        Its header name.
    decimals : list of int or None, optional
        Decimals each column is written with in CSV.
    time_decimals : int, optional
        Decimals of the time column.

    Examples
    --------
    >>> import numpy as np
    >>> t = SampleTable(np.zeros((3, 2)), ["a", "b"])
    >>> t.values.shape, t.names, t.time is None
    ((3, 2), ['a', 'b'], True)
    """

    values: np.ndarray
    names: list[str]
    time: np.ndarray | None = None
    time_name: str = "time"
    #: Decimals each column is written with in CSV (None: full precision, 17 digits).
    decimals: list[int | None] | None = None
    #: Decimals of the time column (None: full precision).
    time_decimals: int | None = None


#: Full precision: 17 significant digits give back every float64 exactly (IEEE 754-2008, 5.12.2).
_FULL = "%.17g"


def csv_decimals(resolution: float, max_error: float | None = None) -> int | None:
    """Decimals a channel's values need in CSV: one digit finer than its resolution.

    Rounding to them moves a value by at most 1/20 of a resolution step (and
    of a peak-error limit, when one is set, so the limit still holds with
    room).  None (full precision) when no resolution is set.
    """
    if not resolution > 0:
        return None
    finest = min(resolution, max_error) if max_error else resolution
    return int(min(max(np.ceil(-np.log10(finest) - 1e-9) + 1, 0), 17))


def _formats(table_decimals, ncols: int) -> list[str]:
    if table_decimals is None:
        return [_FULL] * ncols
    return [_FULL if d is None else f"%.{d}f" for d in table_decimals]


def read_samples(path: str | Path, allow_gaps: bool = False) -> SampleTable:
    """Read a .csv or .npy sample file, naming the row and column of any bad value.

    NaN samples (``nan`` in CSV) are refused unless ``allow_gaps`` (a gap policy
    will handle them).  ``-`` reads CSV from standard input.

    Parameters
    ----------
    path : str or Path
        A ``.csv`` file (header row of names, optional first column ``time`` or
        ``t``), a ``.npy`` file (2-D float array), or ``-``.
    allow_gaps : bool
        Accept NaN samples.

    Returns
    -------
    SampleTable
        The samples, names and time column.

    Raises
    ------
    InputError
        Naming the file, line and column of a bad value.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     path = pathlib.Path(d) / "s.csv"
    ...     _ = path.write_text("time,a,b\\n0,1.5,2\\n1,nan,3\\n")
    ...     try:
    ...         read_samples(path)
    ...     except InputError as e:
    ...         print(e.message[:36])
    ...     table = read_samples(path, allow_gaps=True)
    line 3, column 'a': value is nan, a
    >>> table.names, table.time.tolist(), table.values[:, 1].tolist()
    (['a', 'b'], [0.0, 1.0], [2.0, 3.0])
    """
    if is_stdio(path):
        return _read_csv_text(sys.stdin.read(), "standard input", allow_gaps)
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".csv", ".npy"):
        raise InputError("unknown file type; give a .csv or .npy file", str(path))
    if not path.is_file():
        raise InputError("no such file; check the path", str(path))
    if suffix == ".csv":
        return _read_csv(path, allow_gaps)
    return _read_npy(path, allow_gaps)


def _check_npy_header(path: Path) -> None:
    """Refuse a .npy whose header claims more data than the file holds, before reading it.

    ``np.load`` allocates the array the header declares before it reads the
    data, so a 200-byte file claiming (2e9, 8) float64 would ask for 119 GiB.
    The header (NumPy's format, versions 1 to 3) is read on its own first and
    its shape checked against the file's size.
    """
    fmt = np.lib.format
    try:
        with open(path, "rb") as fh:
            version = fmt.read_magic(fh)
            # version 3 differs from 2 only in the header's text encoding (UTF-8 for
            # field names); a numeric array's header is ASCII either way
            read = (fmt.read_array_header_1_0 if version == (1, 0)
                    else fmt.read_array_header_2_0)
            shape, _fortran, dtype = read(fh, max_header_size=_NPY_MAX_HEADER)
            offset = fh.tell()
        size = path.stat().st_size
    except (ValueError, OSError, EOFError) as exc:
        raise InputError(f"not a readable .npy array ({exc})", str(path)) from None
    if len(shape) != 2 or dtype.hasobject or dtype.kind not in "iuf":
        raise InputError(
            f"expected a 2-D numeric array (samples x channels), got shape {shape} of {dtype}",
            str(path))
    need = shape[0] * shape[1] * dtype.itemsize  # Python ints: no overflow
    if need != size - offset:
        raise InputError(
            f"the header declares a {shape[0]} x {shape[1]} {dtype} array ({need} bytes) but "
            f"the file holds {size - offset} bytes of data; the file is damaged or not what "
            "it claims", str(path))


#: Largest .npy header read (NumPy's own default limit for untrusted files).
_NPY_MAX_HEADER = 10000


def _read_npy(path: Path, allow_gaps: bool = False) -> SampleTable:
    _check_npy_header(path)
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
    if not allow_gaps:
        _check_finite(values, path, [f"ch{i}" for i in range(values.shape[1])], line_offset=None)
    return SampleTable(values, [f"ch{i}" for i in range(values.shape[1])])


def _read_csv(path: Path, allow_gaps: bool = False) -> SampleTable:
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the file as UTF-8 text ({exc.__class__.__name__})",
                         str(path)) from None
    return _read_csv_text(text, path, allow_gaps)


def _read_csv_text(text: str, path, allow_gaps: bool) -> SampleTable:
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
        cells = np.array(body, dtype=str)
        cells = np.where(np.char.strip(cells) == "", "nan", cells)  # empty cell: missing value
        values = cells.astype(np.float64)
    except ValueError:
        for i, row in enumerate(body):
            for j, cell in enumerate(row):
                try:
                    float(cell or "nan")
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
    if not allow_gaps:
        _check_finite(values, path, header, line_offset=2)
    return SampleTable(np.ascontiguousarray(values), header, time, time_name)


def _check_finite(values: np.ndarray, path: Path, names: list[str], line_offset: int | None):
    bad = ~np.isfinite(values)
    if bad.any():
        row, col = np.argwhere(bad)[0]
        where = (f"line {row + line_offset}, column '{names[col]}'" if line_offset is not None
                 else f"sample {row}, channel {col}")
        if np.isnan(values[row, col]):
            raise InputError(
                f"{where}: value is nan, a missing value ({int(bad.sum())} non-finite values "
                "in all); code missing values (empty cells, nan) with --gaps fill or --gaps "
                "mark, or fill them before coding", str(path))
        raise InputError(
            f"{where}: value is {values[row, col]} ({int(bad.sum())} non-finite values in all); "
            "an infinite value cannot be coded: correct it in the input", str(path))


def sample_suffix(path: str | Path) -> str:
    """The sample-file type an output name asks for (``.csv`` or ``.npy``), or one sentence."""
    suffix = Path(path).suffix.lower()
    if suffix not in (".csv", ".npy"):
        raise InputError("unknown output type; name a .csv or .npy file", str(path))
    return suffix


def write_samples(path: str | Path, table: SampleTable, tmp: Path | None = None) -> None:
    """Write samples as .csv (with header and time column if any) or .npy, atomically.

    With ``tmp`` (a temporary file from :func:`atomic_output` the caller commits
    together with other outputs) the file is written there, in the format
    ``path`` names.
    """
    path = Path(path)
    suffix = sample_suffix(path)
    with contextlib.nullcontext(tmp) if tmp is not None else atomic_output(path) as tmp:
        if suffix == ".npy":
            with open(tmp, "wb") as fh:
                np.save(fh, table.values)
            return
        cols = table.values
        names = list(table.names)
        fmt = _formats(table.decimals, cols.shape[1])
        if table.time is not None:
            cols = np.column_stack([table.time, cols])
            names = [table.time_name] + names
            fmt = _formats([table.time_decimals], 1) + fmt
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(",".join(names) + "\n")
            np.savetxt(fh, cols, delimiter=",", fmt=fmt)


@contextlib.contextmanager
def atomic_output(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it into place on success only.

    Parameters
    ----------
    path : str or Path
        The output file.

    Yields
    ------
    Path
        A temporary file in the same folder; it replaces ``path`` when the
        block ends normally and is removed when the block raises.

    Raises
    ------
    InputError
        When the folder does not exist or cannot be written, or ``path`` is a
        folder or not a regular file.

    Examples
    --------
    A failed write leaves the old file as it was and no partial file behind:

    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     out = pathlib.Path(d) / "out.txt"
    ...     with atomic_output(out) as tmp:
    ...         _ = tmp.write_text("first")
    ...     try:
    ...         with atomic_output(out) as tmp:
    ...             _ = tmp.write_text("half")
    ...             raise RuntimeError("interrupted")
    ...     except RuntimeError:
    ...         pass
    ...     print(out.read_text(), sorted(p.name for p in pathlib.Path(d).iterdir()))
    first ['out.txt']
    """
    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    if not directory.is_dir():
        raise InputError("the output folder does not exist; create it first", str(path))
    if path.is_dir():
        raise InputError("the output is a folder; name a file inside it", str(path))
    if path.exists() and not path.is_file():
        # a device or pipe (e.g. /dev/null): renaming onto it would replace it
        raise InputError("the output exists and is not a regular file; name a file",
                         str(path))
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=directory)
    except OSError as exc:
        raise InputError(f"cannot write in the output folder ({exc.strerror}); choose a "
                         "folder you may write to", str(path)) from None
    os.close(fd)
    # mkstemp creates the file private (0600); give it the mode a plain open() would.
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        yield Path(tmp)
        try:
            os.replace(tmp, path)
        except OSError as exc:
            raise InputError(f"cannot put the output in place ({exc.strerror}); check the "
                             "path", str(path)) from None
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


#: Marks standard input / standard output in place of a file name.
STDIO = "-"


def is_stdio(path) -> bool:
    """Whether ``path`` names standard input or output (``-``).

    Parameters
    ----------
    path : str or Path
        A command-line path.

    Returns
    -------
    bool

    Examples
    --------
    >>> is_stdio("-"), is_stdio("data.csv")
    (True, False)
    """
    return str(path) == STDIO


class CsvBlockReader:
    """Sample blocks from CSV text arriving on a binary stream (a pipe), as it arrives.

    The first line is the header (an optional first column ``time``/``t`` is
    kept apart); each :meth:`blocks` item holds the complete rows read so far,
    parsed with NumPy in one go, so a live pipeline codes data as soon as it
    has a frame's worth.  Holds at most one partial line between reads.
    """

    def __init__(self, stream, where: str = "standard input", chunk: int = 65536):
        self._stream = stream
        self._where = where
        self._chunk = chunk
        self._rest = b""
        self.names: list[str] | None = None
        self.has_time = False
        self.time_name = "time"
        self.rows = 0

    def _read(self) -> bytes:
        read1 = getattr(self._stream, "read1", None)
        return read1(self._chunk) if read1 else self._stream.read(self._chunk)

    def blocks(self) -> Iterator[tuple[np.ndarray, np.ndarray | None]]:
        """Yield ``(values, time)`` blocks until the stream ends."""
        while True:
            data = self._read()
            last = not data
            text = self._rest + data
            if last:
                lines, self._rest = text.splitlines(), b""
            else:
                cut = text.rfind(b"\n") + 1
                lines, self._rest = text[:cut].splitlines(), text[cut:]
            lines = [ln for ln in lines if ln.strip()]
            if self.names is None and lines:
                self._header(lines.pop(0))
            if lines:
                yield self._parse(lines)
            if last:
                if self.names is None:
                    raise InputError("no header row arrived; send a CSV header and rows",
                                     self._where)
                return

    def _header(self, line: bytes) -> None:
        try:
            header = [h.strip() for h in line.decode("utf-8-sig").split(",")]
        except UnicodeDecodeError:
            raise InputError("the header row is not UTF-8 text", self._where) from None
        if any(not h for h in header):
            raise InputError("the header row has an empty column name", self._where)
        self.has_time = header[0].lower() in _TIME_NAMES and len(header) > 1
        if self.has_time:
            self.time_name, header = header[0], header[1:]
        self.names = header

    def _parse(self, lines: list[bytes]) -> tuple[np.ndarray, np.ndarray | None]:
        width = len(self.names) + self.has_time
        cells = b",".join(lines).split(b",")
        if len(cells) != width * len(lines):
            counts = np.array([ln.count(b",") + 1 for ln in lines])
            k = int(np.argmax(counts != width))
            raise InputError(f"data row {self.rows + k + 1} has {counts[k]} columns but the "
                             f"header has {width}", self._where)
        try:
            raw = np.array(cells, dtype="S")
            raw = np.where(np.char.strip(raw) == b"", b"nan", raw)  # empty cell: missing value
            values = raw.astype(np.float64).reshape(len(lines), width)
        except ValueError:
            raise InputError(f"a value in data rows {self.rows + 1}-{self.rows + len(lines)} is "
                             "not a number", self._where) from None
        self.rows += len(lines)
        if self.has_time:
            return values[:, 1:], values[:, 0]
        return values, None


def write_csv_block(stream, values: np.ndarray, time: np.ndarray | None = None,
                    decimals: list[int | None] | None = None,
                    time_decimals: int | None = None) -> None:
    """Append rows to a text stream as CSV (NaN written as ``nan``), e.g. standard output.

    ``decimals`` per column and ``time_decimals`` as in :class:`SampleTable`.

    Parameters
    ----------
    stream : text stream
        Where the rows go.
    values : ndarray, shape (rows, channels)
        The samples.
    time : ndarray, optional
        A time column written first.
    decimals : list of int or None, optional
        Decimals per column (None: full precision, 17 significant digits).
    time_decimals : int, optional
        Decimals of the time column.

    Examples
    --------
    >>> import io, numpy as np
    >>> out = io.StringIO()
    >>> write_csv_block(out, np.array([[1.26, np.nan]]), np.array([0.5]), decimals=[1, None],
    ...                 time_decimals=2)
    >>> out.getvalue()
    '0.50,1.3,nan\\n'
    """
    cols = values if time is None else np.column_stack([time, values])
    fmt = _formats(decimals, values.shape[1])
    if time is not None:
        fmt = _formats([time_decimals], 1) + fmt
    if cols.size:
        np.savetxt(stream, cols, delimiter=",", fmt=fmt)
