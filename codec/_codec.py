"""Encoder and decoder: samples -> frames -> coefficients -> terms -> bytes, and back.

Each stage lives in its own module (framing, bases, selection, quantization,
layout, stream search); this module only wires them together, on all frames at
once.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ._bases import Basis, basis_from_code
from ._errors import FrameError, InputError, ProfileError
from ._framing import merge_frames, split_frames
from ._klt import profile_basis
from ._layout import (
    LAYOUT_VERSION,
    LAYOUT_VERSION_2,
    FrameBatch,
    FrameBatchV2,
    expected_length,
    frame_version,
    index_bits,
    pack_frames,
    pack_frames_v2,
    parse_frames_v2,
    parse_headers,
    parse_payloads,
    payload_bits_v2,
)
from ._layout_v3 import LAYOUT_VERSION_3, FrameBatchV3, pack_frames_v3, parse_frames_v3
from ._profile import Profile, profile_id
from ._quantize import code_for_step, step_from_code
from ._report import stream_report
from ._select import (
    _MARGIN,
    choose_steps,
    code_frame,
    frame_budgets,
    reference_energy,
)
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
    basis = profile_basis(profile)  # loads and hash-checks a trained basis
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
    if profile.layout_version == 1:
        offset = np.full(cx.shape[0], 0.5)
        code = choose_steps(cx, mean, dc, budget)
    else:
        code, offset = _rate_fidelity_choice(cx, mean, dc, budget, n, profile.layout_version)

    slack_budget = budget if profile.layout_version == 3 else None
    q, mean_int, _ = code_frame(cx, mean, dc, code, offset, slack_budget)
    recon = reconstruct(q, mean_int, code, basis)
    err = _valid_error(frames, recon, mask)
    limit = _peak_limits(profile, channel)
    peak_mode = bool(np.isfinite(limit).any())

    def step_drop(rows: np.ndarray) -> np.ndarray:
        """Eighth-octave step codes by which each frame's step must shrink (0: it passes)."""
        drop = (err[rows] > budget[rows] * _MARGIN).astype(np.int64)
        if peak_mode:
            pk = _valid_max_error(frames[rows], recon[rows], mask[rows])
            over = pk > limit[rows]
            # a uniform quantizer's error scales with its step
            with np.errstate(over="ignore"):
                ratio = np.minimum(pk / limit[rows], 2.0**1000)
            est = np.ceil(8.0 * np.log2(np.maximum(ratio, 1.0))).astype(np.int64)
            drop = np.maximum(drop, np.where(over, np.maximum(est, 1), 0))
        return drop

    # finest step: keeps every integer code below 2**52 (exact in float64)
    scale = np.abs(cx).max(axis=1)
    if mean is not None:
        scale = np.maximum(scale, np.abs(mean) * np.sqrt(n))
    finest = np.minimum(code_for_step(np.maximum(scale, 1e-300) * 2.0**-52), code)
    rows = np.arange(code.size)
    drop = step_drop(rows)
    while (drop > 0).any():  # closed loop on the reconstruction the decoder will produce
        bad, d = rows[drop > 0], drop[drop > 0]
        if (code[bad] <= finest[bad]).any():
            if peak_mode:
                raise InputError("the peak-error limit is finer than any quantizer step can "
                                 "meet at this signal's magnitude; raise max_error", "profile")
            raise RuntimeError("no quantizer step meets the budget")  # our bug: floor is feasible
        code[bad] = np.maximum(code[bad] - d, finest[bad])
        qb, mb, _ = code_frame(cx[bad], None if mean is None else mean[bad], dc, code[bad],
                               offset[bad])
        q[bad] = qb
        if mean_int is not None:
            mean_int[bad] = mb
        recon[bad] = reconstruct(qb, mb, code[bad], basis)
        err[bad] = _valid_error(frames[bad], recon[bad], mask[bad])
        rows = bad
        drop = step_drop(rows)
        if not (drop > 0).any():
            # Synthesize all frames in one call, as the decoder does: BLAS may round a
            # subset differently from the whole batch, so the check is redone on this.
            recon = reconstruct(q, mean_int, code, basis)
            err = _valid_error(frames, recon, mask)
            rows = np.arange(code.size)
            drop = step_drop(rows)
    fidelity = np.where(e_ref > 0, 1.0 - err / np.where(e_ref > 0, e_ref, 1.0), 1.0)
    met = err <= budget
    floor = budget > (1.0 - profile.fidelity) * e_ref
    x_hat, _ = merge_frames(recon, channel, window, x.shape[0], x.shape[1])
    if profile.layout_version == 1:
        kept = q != 0
        batch = FrameBatch(
            channel=channel, sequence=window, basis=np.full(channel.size, basis.code),
            step_code=code, valid=valid, has_mean=mean_int is not None,
            mean=mean_int if mean_int is not None else np.zeros(channel.size, np.int64),
            terms=kept.sum(axis=1), term_index=np.nonzero(kept)[1], term_value=q[kept],
        )
        data, lengths = pack_frames(batch, profile_id(profile), n)
        frame_bits = lengths * 8
        header_bits = int(frame_bits.sum()) - int(_v1_term_bits(batch, n))
    elif profile.layout_version == 2:
        data, frame_bits, header_bits = _pack_v2(profile, channel, window, valid, code,
                                                 mean_int, q, n)
    else:
        data, frame_bits, header_bits = _pack_v3(profile, channel, window, valid, code,
                                                 mean_int, q, n)
    info = {
        "channel": channel, "window": window, "bits": frame_bits, "terms": (q != 0).sum(axis=1),
        "step_code": code, "error_energy": err, "budget": budget,
        "reference_energy": e_ref, "fidelity": fidelity, "met": met, "floor": floor,
        "max_abs_error": _valid_max_error(frames, recon, mask),
    }
    report = stream_report(x, x_hat, profile, frame_bits, channel, fidelity, met, floor,
                           header_bits=header_bits)
    return EncodeResult(data, profile, x_hat, info, report)


def _v1_term_bits(batch: FrameBatch, n: int) -> int:
    """Bits of the v1 payload that carry terms and the mean (the rest is header)."""
    from ._bits import signed_width

    terms = batch.terms.astype(np.int64)
    vw = np.zeros(terms.size, np.int64)
    if batch.term_value.size:
        starts = np.cumsum(terms) - terms
        nz = terms > 0
        vw[nz] = np.maximum.reduceat(signed_width(batch.term_value[:, None]), starts[nz])
    mw = signed_width(batch.mean[:, None]) if batch.has_mean else np.zeros(terms.size, np.int64)
    return int((mw + terms * (index_bits(n) + vw)).sum())


def _pack_v2(profile: Profile, channel, window, valid, code, mean_int, q, n):
    """Layout v2 frames; returns (bytes, bits per subframe, header bits of the stream)."""
    multi = profile.multi_channel_frames
    rows = channel.size
    if multi:
        frame = window.copy()
        first = np.flatnonzero(np.r_[True, frame[1:] != frame[:-1]])
    else:
        frame = np.arange(rows)
        first = frame
    pid = profile_id(profile)
    parts = []
    bounds = np.r_[first, rows]
    for a in range(0, first.size, _PACK_BLOCK):  # blocks of frames: temporaries stay cached
        b = min(a + _PACK_BLOCK, first.size)
        r0, r1 = bounds[a], bounds[b]
        fs = first[a:b]
        batch = FrameBatchV2(
            multi=np.full(b - a, multi), channel=channel[fs], sequence=window[fs],
            valid=valid[fs], frame=frame[r0:r1] - frame[r0], step_code=code[r0:r1],
            mean=None if mean_int is None else mean_int[r0:r1], q=q[r0:r1])
        parts.append(pack_frames_v2(batch, pid, n))
    data = b"".join(p[0] for p in parts)
    lengths, sub_bits, side_bits = (np.concatenate([p[i] for p in parts]) for i in (1, 2, 3))
    cnt = np.bincount(frame, minlength=first.size)
    overhead = lengths * 8 - np.add.reduceat(sub_bits, first)
    bits = sub_bits + (overhead // cnt)[frame]
    bits[first] += overhead - (overhead // cnt) * cnt
    coef_bits = sub_bits - side_bits
    return data, bits, int(lengths.sum() * 8 - coef_bits.sum())


def _pack_v3(profile: Profile, channel, window, valid, code, mean_int, q, n):
    """Layout v3 frames; returns (bytes, bits per subframe, header bits of the stream).

    Header bits are everything but the range-coded coefficient bytes.
    """
    multi = profile.multi_channel_frames
    w = profile.windows_per_frame
    channels = len(profile.channels)
    group = window // w
    if multi:
        order = np.arange(channel.size)  # rows are window-major, channel-minor already
        frame = group
    else:
        order = np.lexsort((window, channel, group))
        frame = group[order] * channels + channel[order]
    frame = np.unique(frame, return_inverse=True)[1]
    first = np.flatnonzero(np.r_[True, frame[1:] != frame[:-1]])
    lastrow = np.r_[first[1:] - 1, frame.size - 1]
    fo = order[first]
    pid = profile_id(profile)
    nwin = window[order[lastrow]] - window[fo] + 1
    parts = []
    bounds = np.r_[first, frame.size]
    for a in range(0, first.size, _PACK_BLOCK):  # blocks of frames: temporaries stay cached
        b = min(a + _PACK_BLOCK, first.size)
        r0, r1 = bounds[a], bounds[b]
        rows = order[r0:r1]
        batch = FrameBatchV3(
            multi=np.full(b - a, multi), channel=channel[fo[a:b]], sequence=window[fo[a:b]],
            windows=nwin[a:b], valid=valid[order[lastrow[a:b]]],
            frame=frame[r0:r1] - frame[r0], step_code=code[rows],
            mean=None if mean_int is None else mean_int[rows], q=q[rows])
        parts.append(pack_frames_v3(batch, pid, n, channels))
    data = b"".join(p[0] for p in parts)
    lengths, sub_bits, lane_len = (np.concatenate([p[i] for p in parts]) for i in (1, 2, 3))
    cnt = np.bincount(frame, minlength=first.size)
    bits_sorted = np.repeat(lengths * 8 // cnt, cnt)
    bits_sorted[first] += lengths * 8 - (lengths * 8 // cnt) * cnt
    bits = np.empty_like(bits_sorted)
    bits[order] = bits_sorted
    return data, bits, int(lengths.sum() * 8 - lane_len.sum() * 8)


#: Rounding offsets the encoder tries per frame (0.5: nearest; smaller: wider dead zone).
RD_OFFSETS = (0.5, 0.36)
#: Layout 3: the one rounding offset (a slightly widened dead zone).
RD_OFFSET_V3 = 0.42
_RD_BLOCK = 4096
_PACK_BLOCK = 4096


def _rate_fidelity_choice(cx, mean, dc, budget, n, version=2):
    """Per frame, the (step code, rounding offset) pair that meets the budget in fewest bits.

    For each candidate offset the largest step that meets the budget is found,
    and the exact v2 payload size of the result is counted; the cheaper wins.
    """
    nf = cx.shape[0]
    if nf > _RD_BLOCK:  # frames are independent: work block by block so temporaries stay cached
        parts = [_rate_fidelity_choice(cx[a : a + _RD_BLOCK],
                                       None if mean is None else mean[a : a + _RD_BLOCK],
                                       dc, budget[a : a + _RD_BLOCK], n, version)
                 for a in range(0, nf, _RD_BLOCK)]
        return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])
    if version == 3:
        # With the rest of each budget spent by zeroing +-1 codes (spend_slack), one
        # rounding offset does as well as trying two: measured in FRAME_LAYOUT.md.
        code = choose_steps(cx, mean, dc, budget, RD_OFFSET_V3)
        return code, np.full(code.size, RD_OFFSET_V3)
    best_code = best_off = best_bits = None
    for off in RD_OFFSETS:
        code = choose_steps(cx, mean, dc, budget, off, hint=best_code)
        q, mean_int, _ = code_frame(cx, mean, dc, code, off)
        bits = payload_bits_v2(q, mean_int, n)
        if best_bits is None:
            best_code, best_off, best_bits = code, np.full(code.size, off), bits
            continue
        better = bits < best_bits
        best_code = np.where(better, code, best_code)
        best_off = np.where(better, off, best_off)
        best_bits = np.where(better, bits, best_bits)
    return best_code, best_off


def _peak_limits(profile: Profile, channel: np.ndarray) -> np.ndarray:
    lim = np.array([np.inf if c.max_error is None else c.max_error for c in profile.channels])
    return lim[channel]


def _valid_max_error(frames: np.ndarray, recon: np.ndarray, mask: np.ndarray) -> np.ndarray:
    return np.abs(np.where(mask, frames - recon, 0.0)).max(axis=1)


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
    basis = profile_basis(profile)  # loads and hash-checks a trained basis
    loc = locate_frames(data)
    if loc.offsets.size == 0:
        raise FrameError(
            "no frame with a valid sync marker and CRC was found; is this a trimlink stream?"
        )
    buf = np.frombuffer(data, dtype=np.uint8)
    versions = frame_version(buf, loc.offsets)
    if (versions == LAYOUT_VERSION_2).all():
        return _decode_v2(data, loc, profile, basis, n, channels, samples)
    if (versions == LAYOUT_VERSION_3).all():
        return _decode_v2(data, loc, profile, basis, n, channels, samples, version=3)
    if (versions != versions[0]).any():
        f = int(np.argmax(versions != versions[0]))
        raise FrameError(f"the stream mixes frame layout versions {int(versions[0])} and "
                         f"{int(versions[f])}; decode each part separately",
                         f"frame at byte {int(loc.offsets[f])}")
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


def _unwrap(sequence: np.ndarray, modulus: int = 65536) -> np.ndarray:
    """Window index from sequence numbers, assuming steps under half the range."""
    step = (np.diff(sequence) + modulus // 2) % modulus - modulus // 2
    return np.concatenate([[sequence[0]], sequence[0] + np.cumsum(step)]).astype(np.int64)


def _decode_v2(data: bytes, loc, profile: Profile, basis: Basis, n: int, channels: int,
               samples: int | None, version: int = 2) -> DecodeResult:
    """Decode a stream of layout-v2 or v3 frames (all frames located and CRC-checked)."""
    has_mean = profile.reference == "ac"
    parse = parse_frames_v2 if version == 2 else parse_frames_v3
    p = parse(data, loc.offsets, loc.lengths, n, channels, has_mean)
    pid = profile_id(profile) & 0xFF

    def refuse(bad: np.ndarray, message: str) -> None:
        if bad.any():
            f = int(np.argmax(bad))
            raise FrameError(message, f"frame at byte {int(loc.offsets[f])}")

    refuse(p["profile"] != pid,
           f"the frame was made under another profile (id byte {{:#04x}} is not this profile's "
           f"{pid:#04x}); decode with the profile the stream was encoded with".replace(
               "{:#04x}", f"{int(p['profile'][np.argmax(p['profile'] != pid)]):#04x}"))
    refuse(p["channel"][np.r_[np.flatnonzero(np.r_[True, np.diff(p["frame"]) != 0])]]
           >= channels, f"its channel is not in the profile ({channels} channels)")
    refuse(~p["consumed_ok"], "its contents do not match its length field (a corrupt frame "
           "that passed its CRC, or a frame from another profile)")
    fr = p["frame"]
    window_f = _unwrap(p["sequence"], 256)
    window = window_f[fr] + p.get("window_offset", 0)
    valid = p["sub_valid"] if "sub_valid" in p else p["valid"][fr]
    recon = reconstruct(p["q"], p["mean"], p["step_code"], basis)
    total = int((window * n + valid).max()) if samples is None else int(samples)
    out, delivered = merge_frames(recon, p["channel"], window, total, channels)
    cnt = np.bincount(fr, minlength=loc.offsets.size)
    frames = {
        "offset": loc.offsets[fr], "length": loc.lengths[fr],
        "bits": (loc.lengths * 8 // cnt)[fr], "sequence": p["sequence"][fr], "window": window,
        "channel": p["channel"], "basis": np.full(fr.size, basis.code),
        "terms": (p["q"] != 0).sum(axis=1), "step_code": p["step_code"], "valid": valid,
        "version": np.full(fr.size, version),
    }
    return DecodeResult(out, delivered, frames, loc.crc_failures, loc.skipped_bytes)


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
