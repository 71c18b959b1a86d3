"""A basis trained on the user's own history: the Karhunen-Loeve transform (KLT).

The rows are the principal components of frames of past data, ordered by the
energy they carry, so the first few terms hold as much of a typical frame as
any orthonormal basis can (for data like the history).

The constant vector 1/sqrt(N) is kept as the first row and the other N - 1
rows are the principal components of the mean-removed frames: the codec sends
a frame's mean on its own in the ``ac`` reference, and with the constant row
first the ``total`` reference codes the mean as one term.  Each channel is
scaled by its RMS about the frame means before pooling, so a channel with a
large range does not decide the shapes of every other channel.

Basis file (``.cwbasis.npz``: a NumPy ``.npz`` container in our own layout, read without pickle):

==============  ==========================================================
key             contents
==============  ==========================================================
``matrix``      float64 (N, N), rows = orthonormal basis vectors
``energy``      float64 (N,), mean energy per frame along each row (training)
``note``        0-d unicode: a TOML note, the :class:`BasisNote` fields
==============  ==========================================================

The note records ``format`` ("coefwire-klt"), ``format_version`` (1),
``frame_length``, ``input_name``, ``channels``, ``frames_used``,
``trained_utc`` (ISO 8601) and ``sha256``: the SHA-256 of the matrix as
little-endian float64 bytes in row-major order.  A profile names the basis
as ``basis = "klt"`` with ``basis_file`` and ``basis_sha256``; encoder and
decoder load the file and refuse it when the hash differs.

References
----------
K. Karhunen (1947), M. Loeve (1955): expansion of a random process in the
eigenvectors of its covariance.  N. Ahmed, T. Natarajan, K. R. Rao, "Discrete
Cosine Transform", IEEE Trans. Computers C-23 (1974) 90-93, compare the DCT's
energy compaction with the KLT's on a first-order Markov source.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import zipfile
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import tomli_w
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from .._errors import InputError, ProfileError
from .._io import atomic_output
from .._toml import loads_toml
from .bases import MAX_FRAME_LENGTH, Basis, as_basis, register_basis
from .framing import split_frames

__all__ = [
    "KLT_CODE",
    "BasisNote",
    "TrainedBasis",
    "train_klt",
    "save_trained_basis",
    "load_trained_basis",
    "matrix_sha256",
    "profile_basis",
    "note_toml",
    "BASIS_SUFFIX",
]

#: File name ending of a trained basis file (an ``.npz`` container in our own layout).
BASIS_SUFFIX = ".cwbasis.npz"

#: Header code of a trained basis (the header's basis field is 8 bits).
KLT_CODE = 31
_FORMAT = "coefwire-klt"
_FORMAT_VERSION = 1


class BasisNote(BaseModel):
    """Provenance of a trained basis, stored as TOML inside the basis file."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    format: str = _FORMAT
    format_version: int = _FORMAT_VERSION
    frame_length: int = Field(ge=2)
    input_name: str
    channels: tuple[str, ...]
    frames_used: int = Field(ge=1)
    trained_utc: str
    sha256: str = Field(pattern=r"^[0-9a-f]{64}$")


@dataclass(frozen=True)
class TrainedBasis:
    """A trained basis: the matrix, training energies and its provenance note.

    Attributes
    ----------
    matrix : ndarray, shape (n, n)
        Orthonormal rows: the constant 1/sqrt(n), then the principal components
        in order of falling energy.
    energy : ndarray, shape (n,)
        Mean energy per training frame along each row (after channel scaling).
    note : BasisNote
        Provenance: frame length, input name, channels, frames used, time of
        training and the matrix's SHA-256.

    Examples
    --------
    >>> import numpy as np
    >>> t = train_klt(np.random.default_rng(0).standard_normal((512, 2)), 8)
    >>> b = t.basis()
    >>> b.name, b.code, bool(np.allclose(b.matrix @ b.matrix.T, np.eye(8)))
    ('klt', 31, True)
    """

    matrix: np.ndarray
    energy: np.ndarray
    note: BasisNote

    def basis(self) -> Basis:
        """As a :class:`~codec.Basis` named ``klt`` with header code 31."""
        m = np.ascontiguousarray(self.matrix, dtype=np.float64)
        m.setflags(write=False)
        return Basis("klt", KLT_CODE, m)


def matrix_sha256(matrix: np.ndarray) -> str:
    """SHA-256 (hex) of the matrix as little-endian float64, row-major."""
    return hashlib.sha256(np.ascontiguousarray(matrix, dtype="<f8").tobytes()).hexdigest()


def train_klt(values: np.ndarray, n: int, names: list[str] | None = None,
              input_name: str = "(array)") -> TrainedBasis:
    """Fit the KLT on frames of ``values`` (samples x channels).

    Parameters
    ----------
    values : ndarray
        History, samples x channels; every full frame of every channel is used.
    n : int
        Frame length.
    names : list of str, optional
        Channel names for the note.
    input_name : str
        Where the history came from, for the note.

    Returns
    -------
    TrainedBasis
        The matrix (orthonormal rows, the constant first), the training energy
        along each row and the provenance note.

    Raises
    ------
    InputError
        When there are fewer full frames than ``n``: the covariance would be
        singular and its principal components mostly arbitrary.

    Examples
    --------
    On a first-order Markov (AR(1)) source with correlation 0.95 the KLT is
    close to the DCT, the result of Ahmed, Natarajan & Rao (1974): its leading
    principal components match the DCT's first rows.

    >>> import numpy as np, scipy.signal
    >>> e = np.random.default_rng(1).standard_normal(4000)
    >>> x = scipy.signal.lfilter([1.0], [1.0, -0.95], e)  # x[i] = 0.95 x[i-1] + e[i]
    >>> t = train_klt(x[:, None], 8)
    >>> dct = as_basis("dct", 8).matrix
    >>> bool(np.allclose(t.matrix[0], dct[0]))  # the constant row is kept first
    True
    >>> bool(np.all(np.abs(np.sum(t.matrix[1:4] * dct[1:4], axis=1)) > 0.99))
    True
    >>> t.note.frames_used
    500
    """
    x = np.asarray(values, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    names = list(names) if names is not None else [f"ch{i}" for i in range(x.shape[1])]
    frames, channel = _training_frames(x, n)
    matrix, energy = _principal_rows(frames, channel, n, x.shape[1])
    note = BasisNote(
        frame_length=n, input_name=str(input_name), channels=tuple(names),
        frames_used=int(frames.shape[0]),
        trained_utc=_dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat(),
        sha256=matrix_sha256(matrix),
    )
    return TrainedBasis(matrix, energy, note)


def _training_frames(x: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """The full frames of ``x`` (samples x channels) and their channels; refuses too few."""
    if not np.isfinite(x).all():
        raise InputError("the history holds non-finite values; fill the gaps before training")
    if not 2 <= n <= MAX_FRAME_LENGTH:
        raise InputError(f"frame length {n} is outside 2-{MAX_FRAME_LENGTH}; choose a length "
                         "in that range")
    frames, valid, channel, _ = split_frames(x, n)
    full = valid == n
    frames, channel = frames[full], channel[full]
    if frames.shape[0] < n:
        raise InputError(
            f"only {frames.shape[0]} full frames of {n} samples in the history; training a "
            f"basis of {n} vectors needs at least {n} frames: give more history, more "
            "channels, or a shorter frame length")
    return frames, channel


def _principal_rows(frames: np.ndarray, channel: np.ndarray, n: int,
                    channels: int) -> tuple[np.ndarray, np.ndarray]:
    """The KLT matrix (constant row first, then the principal components of the frames
    about their means, each channel scaled to unit rms) and the energy along each row."""
    y = frames - frames.mean(axis=1, keepdims=True)
    rms = np.sqrt(np.bincount(channel, np.einsum("ij,ij->i", y, y), minlength=channels)
                  / (n * np.maximum(np.bincount(channel, minlength=channels), 1)))
    scale = np.where(rms > 0, rms, 1.0)[channel]
    y = y / scale[:, None]
    # An orthonormal basis of the vectors orthogonal to the constant: DCT rows 1..N-1.
    q = as_basis("dct", n).matrix[1:]
    z = y @ q.T
    cov = z.T @ z / z.shape[0]
    eigval, eigvec = np.linalg.eigh(cov)
    order = np.argsort(eigval)[::-1]
    rows = (eigvec[:, order]).T @ q
    # Deterministic sign: the largest entry of each vector is positive.
    pick = np.argmax(np.abs(rows), axis=1)
    rows *= np.sign(rows[np.arange(n - 1), pick])[:, None]
    matrix = np.vstack([np.full(n, 1.0 / np.sqrt(n)), rows])
    # Re-orthonormalise to full precision (QR keeps the rows' directions and order).
    qm, r = np.linalg.qr(matrix.T)
    matrix = (qm * np.sign(np.diag(r))).T
    energy = np.concatenate([[np.mean(frames.mean(axis=1) ** 2 * n / scale**2)],
                             np.maximum(eigval[order], 0.0)])
    return matrix, energy


def save_trained_basis(trained: TrainedBasis, path: str | Path) -> None:
    """Write the basis file (format in the module docstring), atomically.

    Parameters
    ----------
    trained : TrainedBasis
        The basis to store.
    path : str or Path
        The file; its name must end in :data:`BASIS_SUFFIX`.

    Raises
    ------
    InputError
        When the name does not end in :data:`BASIS_SUFFIX`.

    Examples
    --------
    A saved basis loads back bit for bit, and only under its own hash:

    >>> import numpy as np, pathlib, tempfile
    >>> t = train_klt(np.random.default_rng(0).standard_normal((512, 1)), 8)
    >>> with tempfile.TemporaryDirectory() as d:
    ...     path = pathlib.Path(d) / "history.cwbasis.npz"
    ...     save_trained_basis(t, path)
    ...     back = load_trained_basis(path, t.note.sha256)
    ...     try:
    ...         load_trained_basis(path, "0" * 64)
    ...     except ProfileError:
    ...         print("another hash is refused")
    another hash is refused
    >>> bool(np.array_equal(back.matrix, t.matrix)), back.note == t.note
    (True, True)
    """
    path = Path(path)
    if not path.name.lower().endswith(BASIS_SUFFIX):
        raise InputError(f"a basis file must end in {BASIS_SUFFIX}; rename the output", str(path))
    note = tomli_w.dumps(trained.note.model_dump())
    with atomic_output(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, matrix=np.ascontiguousarray(trained.matrix, dtype="<f8"),
                 energy=np.asarray(trained.energy, dtype="<f8"), note=np.array(note))


def load_trained_basis(path: str | Path, sha256: str | None = None) -> TrainedBasis:
    """Read a basis file and check it; with ``sha256`` refuse any other matrix.

    Parameters
    ----------
    path : str or Path
        The basis file.
    sha256 : str, optional
        The SHA-256 the matrix must have (a profile's ``basis_sha256``).

    Returns
    -------
    TrainedBasis
        The checked basis.

    Raises
    ------
    ProfileError
        Naming the file when it is missing, not ours, not orthonormal, or its
        hash differs from the note or from ``sha256``.

    Examples
    --------
    >>> load_trained_basis("no-such.cwbasis.npz")
    Traceback (most recent call last):
    ...
    codec._errors.ProfileError: no-such.cwbasis.npz: no such basis file; ...

    See :func:`save_trained_basis` for a round trip.
    """
    path = Path(path)
    where = str(path)
    if path.is_file():
        _check_members(path)  # declared shapes and sizes, before anything is expanded
    try:
        with np.load(path, allow_pickle=False) as z:
            matrix, energy, note_text = z["matrix"], z["energy"], str(z["note"])
    except FileNotFoundError:
        raise ProfileError("no such basis file; check basis_file in the profile", where) from None
    except (OSError, ValueError, KeyError, zipfile.BadZipFile) as exc:
        raise ProfileError(f"not a coefwire basis file ({exc.__class__.__name__}); make one "
                           "with 'coefwire train'", where) from None
    try:
        note = BasisNote.model_validate(loads_toml(note_text, where, "basis file's note"))
    except (ProfileError, ValidationError):
        raise ProfileError("the basis file's note is damaged; train the basis again",
                           where) from None
    if note.format != _FORMAT or note.format_version != _FORMAT_VERSION:
        raise ProfileError(f"basis format {note.format} v{note.format_version} is not one this "
                           "coefwire reads", where)
    n = note.frame_length
    if matrix.shape != (n, n) or matrix.dtype != np.float64:
        raise ProfileError(f"the matrix is {matrix.shape} {matrix.dtype}, not ({n}, {n}) "
                           "float64; train the basis again", where)
    actual = matrix_sha256(matrix)
    if actual != note.sha256:
        raise ProfileError(f"the matrix's SHA-256 ({actual[:12]}...) differs from the one in "
                           f"its note ({note.sha256[:12]}...); the file was altered", where)
    if sha256 is not None and actual != sha256.lower():
        raise ProfileError(
            f"the trained basis has SHA-256 {actual[:12]}... but the profile expects "
            f"{sha256.lower()[:12]}...; use the basis file the stream was made with", where)
    if not np.allclose(matrix @ matrix.T, np.eye(n), atol=1e-9):
        raise ProfileError("the matrix is not orthonormal; train the basis again", where)
    return TrainedBasis(matrix, energy, note)


#: Largest note a basis file may hold (characters of TOML; a real one has about 400).
_MAX_NOTE_CHARS = 1 << 16


def _check_members(path: Path) -> None:
    """Refuse a basis file whose arrays are not what they claim, before reading them.

    ``np.load`` expands a member to the shape its header declares, so an 8 MB
    deflated file declaring a 32768 x 32768 matrix would allocate 8 GiB before
    any check.  Each member's ``.npy`` header is read on its own first: the
    matrix must be (N, N) float64 with N at most the largest frame length, the
    energy (N,), the note a short string, and every member's expanded size
    exactly what its header declares.
    """
    fmt = np.lib.format
    where = str(path)
    found = {}
    try:
        with zipfile.ZipFile(path) as zf:
            for key in ("matrix", "energy", "note"):
                info = zf.getinfo(f"{key}.npy")
                with zf.open(info) as fh:
                    version = fmt.read_magic(fh)
                    read = (fmt.read_array_header_1_0 if version == (1, 0)
                            else fmt.read_array_header_2_0)
                    shape, _fortran, dtype = read(fh, max_header_size=10000)
                    offset = fh.tell()
                need = int(np.prod(shape, dtype=object)) * dtype.itemsize  # exact, no overflow
                if info.file_size != offset + need:
                    raise ProfileError(f"the {key} array declares {shape} {dtype} but its member "
                                       "holds another size; the file is damaged", where)
                found[key] = (shape, dtype)
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile, zlib.error) as exc:
        if isinstance(exc, ProfileError):
            raise
        raise ProfileError(f"not a coefwire basis file ({exc.__class__.__name__}); make one "
                           "with 'coefwire train'", where) from None
    (mshape, mtype), (eshape, _), (nshape, ntype) = (found[k] for k in ("matrix", "energy",
                                                                         "note"))
    if (len(mshape) != 2 or mshape[0] != mshape[1] or not 2 <= mshape[0] <= MAX_FRAME_LENGTH
            or mtype != np.dtype("<f8") or eshape != mshape[:1]):
        raise ProfileError(f"the matrix is {mshape} {mtype} (energy {eshape}), not (N, N) "
                           f"float64 with N from 2 to {MAX_FRAME_LENGTH}; train the basis "
                           "again", where)
    if nshape != () or ntype.kind != "U" or ntype.itemsize > 4 * _MAX_NOTE_CHARS:
        raise ProfileError("the basis file's note is not a short text; train the basis again",
                           where)


def note_toml(trained: TrainedBasis) -> str:
    """The provenance note as TOML text (what the basis file stores)."""
    return tomli_w.dumps(trained.note.model_dump())


def profile_basis(profile) -> Basis:
    """The basis a profile names; a trained basis is loaded and its hash checked.

    This is the one place encoder and decoder resolve ``profile.basis``.
    """
    n = profile.frame_length
    if profile.basis != "klt":
        return as_basis(profile.basis, n)
    trained = load_trained_basis(profile.basis_file, profile.basis_sha256)
    if trained.note.frame_length != n:
        raise ProfileError(
            f"the trained basis is for frames of {trained.note.frame_length} samples but the "
            f"profile's frame_length is {n}; train a basis for this frame length",
            str(profile.basis_file))
    return trained.basis()


def _klt_placeholder(n: int) -> np.ndarray:  # pragma: no cover - check() always refuses first
    raise RuntimeError("a trained basis is loaded from its file, never built")


register_basis("klt", KLT_CODE, _klt_placeholder,
               lambda n: "is trained on data: name its file with basis_file and basis_sha256 "
               "in the profile (make one with 'coefwire train')")
