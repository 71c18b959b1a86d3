"""Encoder and decoder: samples -> frames -> coefficients -> terms -> bytes, and back.

Each stage lives in its own module (framing, bases, selection, quantization,
layout, stream search); this module only wires them together, on all frames at
once.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ._bases import Basis, as_basis
from ._bits import MAX_FIELD_BITS
from ._errors import FrameError, InputError, ProfileError
from ._framing import merge_frames, split_frames
from ._gaps import GAP_POLICIES, fill_gaps, pack_gap_frame, parse_gap_frame
from ._layout import (
    FLAG_GAP_MASK,
    GAP_KIND,
    LAYOUT_VERSION,
    SYNC,
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
from ._stream import DELIVERED

__all__ = ["EncodeResult", "DecodeResult", "FrameRows", "encode", "decode", "decode_frames",
           "check_some_frame",
           "as_samples", "reconstruct"]


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
    matching boolean mask and ``status`` the per-sample account (delivered,
    lost, gap).
    """

    samples: np.ndarray
    delivered: np.ndarray
    frames: dict
    crc_failures: list[int] = field(default_factory=list)
    skipped_bytes: int = 0
    #: Per sample and channel: LOST 0, DELIVERED 1, GAP 2 (codes in ``codec._stream``).
    status: np.ndarray | None = None
    #: What happened to frames that did not make it (capped list of dicts).
    events: list = field(default_factory=list)
    #: Frame and sample counts; samples_delivered + samples_lost + samples_gap = samples.
    counts: dict = field(default_factory=dict)
    #: Whether the stream's end is certain (stream note, or a short last frame received).
    end_known: bool = False


def as_samples(samples, where: str = "input", allow_gaps: bool = False) -> np.ndarray:
    """Validate and convert samples to a C-contiguous float64 (samples x channels) array.

    NaN and infinite samples are refused unless ``allow_gaps`` (a gap policy handles them).
    """
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
    if bad.any() and not allow_gaps:
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
    # einsum (not BLAS matmul): each row's sum runs in one fixed order whatever the
    # batch size, so a frame decodes bit-identically alone, in any batch, or in the
    # encoder's closed-loop check -- the streaming decoder relies on it.
    frames = np.einsum("ij,jk->ik", q.astype(np.float64) * step[:, None], basis.matrix)
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


def encode(samples, profile: Profile, gaps: str = "refuse", first_window: int = 0) -> EncodeResult:
    """Code ``samples`` (samples x channels) under ``profile``; every frame meets its budget.

    The target is checked on the reconstruction the decoder will produce, and
    any frame that misses it is re-quantized with a finer step until it holds.
    ``gaps`` is the policy for NaN samples (``codec._gaps``: refuse, fill,
    mark); ``first_window`` numbers the first time window (the streaming
    encoder codes a live stream block by block).
    """
    if gaps not in GAP_POLICIES:
        raise InputError(f"unknown gap policy {gaps!r}; choose one of {', '.join(GAP_POLICIES)}")
    if gaps == "refuse":
        x = as_samples(samples)
        missing = None
    else:
        x, missing = fill_gaps(as_samples(samples, allow_gaps=True), empty=gaps == "mark")
        if not missing.any():
            missing = None
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
        channel=channel, sequence=window + first_window,
        basis=np.full(channel.size, basis.code),
        step_code=code, valid=valid, has_mean=mean_int is not None,
        mean=mean_int if mean_int is not None else np.zeros(channel.size, np.int64),
        terms=kept.sum(axis=1), term_index=np.nonzero(kept)[1], term_value=q[kept],
    )
    gap_frames = None
    if missing is not None and gaps == "mark":
        fmiss = split_frames(missing.astype(np.float64), n)[0] > 0
        gap_frames = fmiss.any(axis=1)
        batch.flags = np.where(gap_frames, FLAG_GAP_MASK, 0)
    data, lengths = pack_frames(batch, profile_id(profile), n)
    extra_bits = 0
    if gap_frames is not None:
        data, lengths, extra_bits = _add_gap_frames(data, lengths, fmiss, gap_frames, batch,
                                                    profile_id(profile), n)
    fidelity = np.where(e_ref > 0, 1.0 - err / np.where(e_ref > 0, e_ref, 1.0), 1.0)
    met = err <= budget
    floor = budget > (1.0 - profile.fidelity) * e_ref
    x_hat, _ = merge_frames(recon, channel, window, x.shape[0], x.shape[1])
    info = {
        "channel": channel, "window": window, "bits": lengths * 8, "terms": batch.terms,
        "step_code": code, "error_energy": err, "budget": budget,
        "reference_energy": e_ref, "fidelity": fidelity, "met": met, "floor": floor,
    }
    report = stream_report(x, x_hat, profile, lengths * 8, channel, fidelity, met, floor,
                           extra_bits=extra_bits)
    report["gap_policy"] = gaps
    report["samples_gap"] = 0 if missing is None else int(missing.sum())
    if missing is not None and gaps == "mark":
        x_hat = np.where(missing, np.nan, x_hat)  # what the receiver reproduces
    return EncodeResult(data, profile, x_hat, info, report)


def _add_gap_frames(data: bytes, lengths: np.ndarray, fmiss: np.ndarray, has_gap: np.ndarray,
                    batch: FrameBatch, pid: int, n: int) -> tuple[bytes, np.ndarray, int]:
    """Put a gap-mask frame after each data frame with gaps; drop data frames that are all gap.

    Returns the new stream, the data frames' lengths (0 for a dropped one) and
    the gap frames' bits.
    """
    starts = np.cumsum(lengths) - lengths
    pieces: list[bytes] = []
    out_len = lengths.copy()
    extra = 0
    mv = memoryview(data)
    for f in range(len(batch)):  # one slice per frame; gap frames are packed one by one
        valid = int(batch.valid[f])
        if not has_gap[f]:
            pieces.append(mv[starts[f] : starts[f] + lengths[f]])
            continue
        if not fmiss[f, :valid].all():
            pieces.append(mv[starts[f] : starts[f] + lengths[f]])
        else:
            out_len[f] = 0
        g = pack_gap_frame(pid, int(batch.channel[f]), int(batch.sequence[f]), valid,
                           fmiss[f], n)
        pieces.append(g)
        extra += 8 * len(g)
    return b"".join(pieces), out_len, extra


def _valid_error(frames: np.ndarray, recon: np.ndarray, mask: np.ndarray) -> np.ndarray:
    e = np.where(mask, frames - recon, 0.0)
    return np.einsum("ij,ij->i", e, e)


@dataclass
class FrameRows:
    """CRC-valid frames interpreted under a profile (the decode half's per-frame step).

    One entry per frame, in arrival order.  ``verdict`` is ``"ok"`` or the
    reason the frame is refused (a short key; ``detail`` says it in words).
    ``rows`` holds the decoded samples of accepted data frames (NaN elsewhere);
    ``masks`` the gap masks of accepted gap-mask frames, by frame index.
    """

    kind: np.ndarray  # 0 data frame, 1 gap-mask frame
    verdict: list
    detail: list
    head: dict  # header fields of data frames (0 where not a data frame)
    crc: np.ndarray
    rows: np.ndarray
    masks: dict


_HEAD_KEYS = ("profile", "channel", "sequence", "basis", "terms", "step_code", "valid", "flags",
              "version")


def decode_frames(frames: list[bytes], profile: Profile, basis: Basis) -> FrameRows:
    """Interpret CRC-valid frames; a foreign or impossible frame becomes a verdict, never an error.

    Every length and count read from the wire is checked against the profile
    (terms <= N, widths <= 57 bits, valid in 1..N, term index < N, length field
    equal to the length the fields imply) before any payload field is read.
    """
    n = profile.frame_length
    nf = len(frames)
    lengths = np.fromiter((len(f) for f in frames), dtype=np.int64, count=nf)
    offsets = np.cumsum(lengths) - lengths
    buf = np.frombuffer(b"".join(frames), dtype=np.uint8)
    version = buf[offsets + len(SYNC)] >> 4 if nf else np.zeros(0, np.int64)
    crc = ((buf[offsets + lengths - 2].astype(np.int64) << 8) | buf[offsets + lengths - 1]
           if nf else np.zeros(0, np.int64))
    kind = np.where(version == GAP_KIND, 1, 0)
    verdict = ["ok"] * nf
    detail = [""] * nf
    head = {k: np.zeros(nf, dtype=np.int64) for k in _HEAD_KEYS}
    rows = np.full((nf, n), np.nan)
    masks: dict[int, np.ndarray] = {}
    pid = profile_id(profile)

    ok = np.ones(nf, dtype=bool)  # mirror of verdict == "ok", for whole-array selection

    def refuse(idx: np.ndarray, bad: np.ndarray, key: str, words) -> None:
        for f in idx[bad & ok[idx]].tolist():  # only the refused frames, usually none
            ok[f] = False
            verdict[f] = key
            detail[f] = words(f) if callable(words) else words

    data = np.flatnonzero(version == LAYOUT_VERSION)
    if data.size:
        h = parse_headers(buf, offsets[data])
        for k in _HEAD_KEYS:
            head[k][data] = h[k]
        refuse(data, h["profile"] != pid, "foreign_profile",
               lambda f: f"made under profile id {int(head['profile'][f]):#06x}, not {pid:#06x}")
        refuse(data, (h["flags"] & ~FLAG_GAP_MASK) != 0, "bad_header", "reserved flags set")
        refuse(data, h["channel"] >= len(profile.channels), "bad_header",
               f"channel not in the profile ({len(profile.channels)} channels)")
        refuse(data, h["basis"] != basis.code, "bad_header",
               f"basis code differs from the profile's {basis.name!r}")
        refuse(data, h["terms"] > n, "bad_header", f"claims more terms than the {n} of a frame")
        refuse(data, (h["value_width"] > MAX_FIELD_BITS) | (h["mean_width"] > MAX_FIELD_BITS),
               "bad_header", f"a field width exceeds {MAX_FIELD_BITS} bits")
        refuse(data, (h["valid"] < 1) | (h["valid"] > n), "bad_header",
               f"valid samples outside 1..{n}")
        refuse(data, (h["mean_width"] > 0) != (profile.reference == "ac"), "bad_header",
               "mean field does not match the profile's reference")
        # Only now, with terms and widths bounded, is the implied length safe to compute.
        sane = ok[data]
        implied = np.where(sane, expected_length({k: np.where(sane, v, 0) for k, v in h.items()},
                                                 n), h["length"])
        refuse(data, implied != h["length"], "bad_header", "length field does not match contents")
        good = data[ok[data]]
        if good.size:
            gh = {k: v[ok[data]] for k, v in h.items()}
            mean, index, value = parse_payloads(buf, offsets[good], gh, n)
            owner = np.repeat(np.arange(good.size), gh["terms"])
            badidx = np.zeros(good.size, dtype=bool)
            badidx[owner[index >= n]] = True
            refuse(good, badidx, "bad_header", f"a term index is not below the frame length {n}")
            q = np.zeros((good.size, n), dtype=np.int64)
            ok_t = ~badidx[owner]
            q[owner[ok_t], index[ok_t]] = value[ok_t]
            mean_int = np.where(gh["mean_width"] > 0, mean, 0) if profile.reference == "ac" \
                else None
            recon = reconstruct(q, mean_int, gh["step_code"], basis)
            recon[badidx] = np.nan
            rows[good] = recon
    for f in np.flatnonzero(kind == 1):  # gap-mask frames are rare: one parse each
        parsed = parse_gap_frame(frames[f], n)
        if isinstance(parsed, str):
            verdict[f], detail[f] = "bad_header", parsed
            continue
        gh, mask = parsed
        for k in ("profile", "channel", "sequence", "valid"):
            head[k][f] = gh[k]
        head["version"][f] = GAP_KIND
        if gh["profile"] != pid:
            verdict[f], detail[f] = "foreign_profile", f"gap frame of profile {gh['profile']:#06x}"
        elif gh["channel"] >= len(profile.channels):
            verdict[f], detail[f] = "bad_header", "gap frame channel not in the profile"
        else:
            masks[int(f)] = mask
    return FrameRows(kind, verdict, detail, head, crc, rows, masks)


def decode(data: bytes, profile: Profile, samples: int | None = None,
           reorder: int = 16, strict: bool = True) -> DecodeResult:
    """Decode a whole stream made under ``profile`` (bound: one channel spec per column).

    The same machine as the streaming decoder (:class:`codec._streaming.StreamDecoder`)
    fed the whole stream at once, so both give identical results.  Frames whose
    CRC fails never reach the output; foreign, damaged, duplicated or late
    frames become events in the result, not errors.  ``samples`` (the stream
    note's count) fixes the output length; without it the stream runs to the
    last frame received, and ``end_known`` says whether that end is certain.

    Raises :class:`ProfileError` when the profile lists no channels and, when
    ``strict``, :class:`FrameError` when not one frame was accepted (saying
    why: no frame at all, or frames of another profile).  With ``strict``
    False such a stream gives an all-lost result and its counts.
    """
    from ._streaming import StreamDecoder  # the streaming module builds on this one

    dec = StreamDecoder(profile, samples=samples, reorder=reorder, keep_frames=True)
    blocks = dec.feed(data) + dec.close()
    if strict:
        check_some_frame(dec.counts(), dec.events)
    channels = len(profile.channels)
    values = np.concatenate([b.samples for b in blocks]) if blocks else np.zeros((0, channels))
    status = (np.concatenate([b.status for b in blocks]) if blocks
              else np.zeros((0, channels), np.uint8))
    return DecodeResult(values, status == DELIVERED, dec.frame_table(), dec.scanner.crc_failures,
                        dec.scanner.skipped_bytes, status, dec.events, dec.counts(),
                        dec.end_known)


def check_some_frame(counts: dict, events: list) -> None:
    """Raise :class:`FrameError` saying why, when a stream delivered no frame at all."""
    if counts.get("frames_ok", 0) or counts.get("gap_frames_ok", 0):
        return
    foreign = [e for e in events if e["event"] == "foreign_profile"]
    if foreign:
        raise FrameError(
            f"{counts.get('frames_foreign_profile', 0)} frames passed their CRC but were "
            f"{foreign[0].get('detail', 'made under another profile')}; decode with the profile "
            "the stream was encoded with", f"frame at byte {foreign[0]['offset']}")
    refused = [e for e in events if e["event"] == "bad_header"]
    if refused:
        raise FrameError(f"every CRC-valid frame was refused ({refused[0].get('detail')}); the "
                         "stream does not match this profile", f"frame at byte "
                         f"{refused[0]['offset']}")
    raise FrameError("no frame with a valid sync marker and CRC was found; is this a trimlink "
                     "stream?")
