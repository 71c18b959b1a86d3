"""Encoder and decoder: samples -> frames -> coefficients -> terms -> bytes, and back.

Each stage lives in its own module (framing, bases, selection, quantization,
layout, stream search); this module only wires them together, on all frames at
once.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ._bases import Basis, as_basis, basis_from_code
from ._errors import FrameError, InputError, ProfileError
from ._framing import merge_frames, split_frames
from ._layout import (
    LAYOUT_VERSION,
    FrameBatch,
    expected_length,
    pack_frames,
    parse_headers,
    parse_payloads,
)
from ._profile import Profile, profile_id
from ._quantize import step_from_code
from ._report import stream_report
from ._select import _MARGIN, choose_steps, code_frame, frame_budgets, reference_energy
from ._stream import locate_frames

__all__ = ["EncodeResult", "DecodeResult", "encode", "decode", "as_samples", "reconstruct"]


@dataclass
class EncodeResult:
    """The coded stream and what the encoder knows about it.

    Attributes
    ----------
    data : bytes
        The stream: frames back to back.
    profile : Profile
        The bound profile the stream is tagged with.
    reconstruction : ndarray
        What a decoder will return (samples x channels).
    frames : dict of ndarray
        Per frame: ``channel``, ``window``, ``bits``, ``terms``, ``step_code``,
        ``error_energy``, ``budget``, ``reference_energy``, ``fidelity``, ``met``.
    report : dict
        The JSON report (see :func:`codec._report.stream_report`).
    """

    data: bytes
    profile: Profile
    reconstruction: np.ndarray
    frames: dict
    report: dict


@dataclass
class DecodeResult:
    """Decoded samples and an account of every frame.

    ``samples`` holds NaN where no frame delivered data; ``delivered`` is the
    matching boolean mask.
    """

    samples: np.ndarray
    delivered: np.ndarray
    frames: dict
    crc_failures: list[int] = field(default_factory=list)
    skipped_bytes: int = 0


def as_samples(samples, where: str = "input") -> np.ndarray:
    """Validate and convert samples to a C-contiguous float64 (samples x channels) array."""
    try:
        x = np.asarray(samples, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError("samples are not numeric; give a 2-D array of numbers", where) from None
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2:
        raise InputError(f"samples must be 2-D (samples x channels), got {x.ndim}-D", where)
    if x.size == 0:
        raise InputError("there are no samples; give at least one row of data", where)
    bad = ~np.isfinite(x)
    if bad.any():
        row, col = np.argwhere(bad)[0]
        raise InputError(
            f"sample {row} of channel {col} is {x[row, col]} ({int(bad.sum())} non-finite values "
            "in all); remove or fill the gaps before coding",
            where,
        )
    return np.ascontiguousarray(x)


def reconstruct(q: np.ndarray, mean_int: np.ndarray | None, code: np.ndarray,
                basis: Basis) -> np.ndarray:
    """Frames from integer codes: the one synthesis both ends run."""
    step = step_from_code(code)
    frames = basis.synthesize(q.astype(np.float64) * step[:, None])
    if mean_int is not None:
        frames += (mean_int * (step / np.sqrt(basis.n)))[:, None]
    return frames


def _bind(profile: Profile, channels: int) -> Profile:
    if not profile.channels:
        return profile.bind([f"ch{i}" for i in range(channels)])
    if len(profile.channels) != channels:
        raise ProfileError(
            f"the profile lists {len(profile.channels)} channels but the input has {channels}; "
            "give a profile for this input"
        )
    return profile


def encode(samples, profile: Profile) -> EncodeResult:
    """Code ``samples`` (samples x channels) under ``profile``; every frame meets its budget.

    The target is checked on the reconstruction the decoder will produce, and
    any frame that misses it is re-quantized with a finer step until it holds.
    """
    x = as_samples(samples)
    profile = _bind(profile, x.shape[1])
    n = profile.frame_length
    basis = as_basis(profile.basis, n)
    frames, valid, channel, window = split_frames(x, n)
    mask = np.arange(n) < valid[:, None]
    resolution = np.array([c.resolution for c in profile.channels])[channel]
    peak = np.abs(np.where(mask, frames, 0.0)).max(axis=1)
    e_ref = reference_energy(frames, valid, profile.reference)
    budget = frame_budgets(e_ref, profile.fidelity, resolution, valid, peak, n)
    mean = None
    if profile.reference == "ac":
        mean = np.where(mask, frames, 0.0).sum(axis=1) / valid
    cx = basis.analyze(frames)
    dc = basis.analyze(np.ones(n))
    code = choose_steps(cx, mean, dc, budget)

    q, mean_int, _ = code_frame(cx, mean, dc, code)
    recon = reconstruct(q, mean_int, code, basis)
    err = _valid_error(frames, recon, mask)
    bad = np.flatnonzero(err > budget * _MARGIN)
    while bad.size:  # closed loop: tighten the step of frames that miss on the samples
        if (code[bad] == 0).any():
            raise RuntimeError("no quantizer step meets the budget")  # our bug: floor is feasible
        code[bad] -= 1
        qb, mb, _ = code_frame(cx[bad], None if mean is None else mean[bad], dc, code[bad])
        q[bad] = qb
        if mean_int is not None:
            mean_int[bad] = mb
        recon[bad] = reconstruct(qb, mb, code[bad], basis)
        err[bad] = _valid_error(frames[bad], recon[bad], mask[bad])
        bad = bad[err[bad] > budget[bad] * _MARGIN]
        if not bad.size:
            # Synthesize all frames in one call, as the decoder does: BLAS may round a
            # subset differently from the whole batch, so the check is redone on this.
            recon = reconstruct(q, mean_int, code, basis)
            err = _valid_error(frames, recon, mask)
            bad = np.flatnonzero(err > budget * _MARGIN)

    kept = q != 0
    batch = FrameBatch(
        channel=channel, sequence=window, basis=np.full(channel.size, basis.code),
        step_code=code, valid=valid, has_mean=mean_int is not None,
        mean=mean_int if mean_int is not None else np.zeros(channel.size, np.int64),
        terms=kept.sum(axis=1), term_index=np.nonzero(kept)[1], term_value=q[kept],
    )
    data, lengths = pack_frames(batch, profile_id(profile), n)
    fidelity = np.where(e_ref > 0, 1.0 - err / np.where(e_ref > 0, e_ref, 1.0), 1.0)
    met = err <= budget
    floor = budget > (1.0 - profile.fidelity) * e_ref
    x_hat, _ = merge_frames(recon, channel, window, x.shape[0], x.shape[1])
    info = {
        "channel": channel, "window": window, "bits": lengths * 8, "terms": batch.terms,
        "step_code": code, "error_energy": err, "budget": budget,
        "reference_energy": e_ref, "fidelity": fidelity, "met": met, "floor": floor,
    }
    report = stream_report(x, x_hat, profile, lengths * 8, channel, fidelity, met, floor)
    return EncodeResult(data, profile, x_hat, info, report)


def _valid_error(frames: np.ndarray, recon: np.ndarray, mask: np.ndarray) -> np.ndarray:
    e = np.where(mask, frames - recon, 0.0)
    return np.einsum("ij,ij->i", e, e)


def decode(data: bytes, profile: Profile, samples: int | None = None) -> DecodeResult:
    """Decode a stream made under ``profile`` (bound: one channel spec per column).

    Frames whose CRC fails never reach the output.  ``samples`` fixes the
    output length; by default it runs to the end of the last frame received.
    Raises :class:`FrameError` when the stream holds no frame of ours or a
    frame was made under another profile or layout version.
    """
    n = profile.frame_length
    channels = len(profile.channels)
    if channels == 0:
        raise ProfileError("the profile lists no channels; decode with the stream's own profile")
    basis = as_basis(profile.basis, n)
    loc = locate_frames(data)
    if loc.offsets.size == 0:
        raise FrameError(
            "no frame with a valid sync marker and CRC was found; is this a trimlink stream?"
        )
    buf = np.frombuffer(data, dtype=np.uint8)
    head = parse_headers(buf, loc.offsets)
    _check_headers(head, loc.offsets, profile, basis, n)
    mean, index, value = parse_payloads(buf, loc.offsets, head, n)
    nf = loc.offsets.size
    owner = np.repeat(np.arange(nf), head["terms"])
    if index.size and index.max() >= n:
        f = owner[np.argmax(index >= n)]
        raise FrameError(f"term index {index.max()} is not below the frame length {n}",
                         f"frame at byte {loc.offsets[f]}")
    q = np.zeros((nf, n), dtype=np.int64)
    q[owner, index] = value
    has_mean = head["mean_width"] > 0
    mean_int = np.where(has_mean, mean, 0) if profile.reference == "ac" else None
    recon = reconstruct(q, mean_int, head["step_code"], basis)
    window = _unwrap(head["sequence"])
    valid = head["valid"]
    total = int((window * n + valid).max()) if samples is None else int(samples)
    out, delivered = merge_frames(recon, head["channel"], window, total, channels)
    # A short frame's padding is not data: blank it unless a later window covers it.
    frames = {
        "offset": loc.offsets, "length": loc.lengths, "bits": loc.lengths * 8,
        "sequence": head["sequence"], "window": window, "channel": head["channel"],
        "basis": head["basis"], "terms": head["terms"], "step_code": head["step_code"],
        "valid": valid,
    }
    return DecodeResult(out, delivered, frames, loc.crc_failures, loc.skipped_bytes)


def _unwrap(sequence: np.ndarray) -> np.ndarray:
    """Window index from 16-bit sequence numbers, assuming steps under half the range."""
    step = (np.diff(sequence) + 32768) % 65536 - 32768
    return np.concatenate([[sequence[0]], sequence[0] + np.cumsum(step)]).astype(np.int64)


def _check_headers(head: dict, offsets: np.ndarray, profile: Profile, basis: Basis, n: int) -> None:
    def refuse(bad: np.ndarray, message: str) -> None:
        if bad.any():
            f = int(np.argmax(bad))
            raise FrameError(message.format(**{k: int(v[f]) for k, v in head.items()}),
                             f"frame at byte {int(offsets[f])}")

    refuse(head["version"] != LAYOUT_VERSION,
           "layout version {version} is not one this trimlink reads (it reads version "
           f"{LAYOUT_VERSION}); decode with the trimlink that wrote the stream")
    refuse(head["flags"] != 0, "reserved flags are set ({flags}); the frame is from a newer layout")
    pid = profile_id(profile)
    refuse(head["profile"] != pid,
           "the frame was made under profile id {profile:#06x}, not this profile's "
           f"{pid:#06x}; decode with the profile the stream was encoded with")
    refuse(head["channel"] >= len(profile.channels),
           f"channel {{channel}} is not in the profile ({len(profile.channels)} channels)")
    if (head["basis"] != basis.code).any():
        code = int(head["basis"][np.argmax(head["basis"] != basis.code)])
        try:
            other = basis_from_code(code, n).name
        except InputError:
            other = f"code {code}"
        refuse(head["basis"] != basis.code,
               f"the frame uses basis {other!r} but the profile says {basis.name!r}; "
               "encoder and decoder must agree on the basis")
    refuse(head["terms"] > n, f"it claims {{terms}} terms but a frame has only {n}")
    refuse((head["value_width"] > 57) | (head["mean_width"] > 57),
           "a value width ({value_width}) or mean width ({mean_width}) exceeds 57 bits")
    refuse((head["valid"] < 1) | (head["valid"] > n),
           f"it claims {{valid}} valid samples; a frame holds 1 to {n}")
    refuse((head["mean_width"] > 0) != (profile.reference == "ac"),
           "its mean field does not match the profile's reference")
    refuse(head["length"] != expected_length(head, n),
           "its length field ({length}) does not match its contents")
