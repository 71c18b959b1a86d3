"""Encoder and decoder: samples -> frames -> coefficients -> terms -> bytes, and back.

Each stage lives in its own module (framing, bases, selection, quantization,
layout, stream search); this module only wires them together, on all frames at
once.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from functools import partial

import numpy as np

from ._errors import FrameError, InputError, ProfileError
from ._profile import Profile, profile_digest, profile_id
from .entropy.bits import MAX_FIELD_BITS
from .entropy.rangecoder import coefficient_cost_bits
from .entropy.rice import exp_golomb_bits, zigzag
from .layouts.gapmask import GAP_POLICIES, fill_gaps, pack_gap_frame, parse_gap_frame
from .layouts.v1v2 import (
    GAP_KIND,
    LAYOUT_VERSION,
    LAYOUT_VERSION_2,
    PROFILE_BITS_V2,
    SEQUENCE_BITS_V2,
    SYNC,
    FrameBatch,
    FrameBatchV2,
    FrameKey,
    expected_length,
    frame_crc_ok,
    frame_extent,
    index_bits,
    pack_frames,
    pack_frames_v2,
    parse_frames_v2,
    parse_headers,
    parse_payloads,
    payload_bits_v2,
)
from .layouts.v3v4 import (
    LAYOUT_VERSION_3,
    LAYOUT_VERSION_4,
    FrameBatchV3,
    pack_frames_v3,
    parse_frames_v3,
)
from .quantize.select import (
    _MARGIN,
    block_budgets,
    block_sums,
    budget_blocks,
    check_magnitude,
    choose_block_steps,
    choose_steps,
    code_frame,
    frame_budgets,
    reference_energy,
)
from .quantize.steps import code_for_step, step_from_code
from .quantize.trellis import dequantize_levels
from .report import EncodeTally, encode_report
from .stream.search import DELIVERED, locate_frames
from .transform.bases import Basis, basis_fingerprint
from .transform.framing import merge_frames, split_frames
from .transform.klt import profile_basis

__all__ = ["EncodeResult", "DecodeResult", "FrameRows", "encode", "decode", "decode_frames",
           "check_some_frame", "frame_key",
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
        ``error_energy``, ``budget`` (the window's own), ``reference_energy``,
        ``fidelity`` (the window's own), ``met`` (its budget block's), ``block``
        (the budget block the frame belongs to).  Per budget block (window
        scope: one per frame; frame scope: the windows of one channel in one
        frame on the wire): ``block_budget``, ``block_reference_energy``,
        ``block_error_energy``, ``block_fidelity``, ``block_met``, ``block_floor``.
    report : dict
        The JSON report (see :func:`codec.report.stream_report`).
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
    #: Per sample and channel: LOST 0, DELIVERED 1, GAP 2 (codes in ``codec.stream.search``).
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
                basis: Basis, trellis: bool = False) -> np.ndarray:
    """Frames from integer codes: the one synthesis both ends run.

    ``trellis`` (a bool, or one per row): rows of levels of dependent
    quantization (layout 4).
    """
    step = step_from_code(code)
    if np.any(trellis):
        rows = np.broadcast_to(np.asarray(trellis, dtype=bool), (q.shape[0],))
        q = q.astype(np.float64)
        q[rows] = dequantize_levels(q[rows].astype(np.int64))
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


@functools.lru_cache(maxsize=32)
def _fingerprint(basis: Basis) -> str:
    return basis_fingerprint(basis.matrix)  # bases are cached objects: hash each once


@functools.lru_cache(maxsize=32)
def _key_of(digest: bytes) -> FrameKey:
    return FrameKey(digest)  # one cache of per-length CRC start values per profile


def frame_key(profile: Profile, basis: Basis | None = None) -> FrameKey:
    """The profile's share of every frame's CRC: its digest with the basis fingerprint.

    ``basis`` is the profile's basis when already built (else it is built, a
    trained one loaded and hash-checked).  Every frame search and every packer
    takes this key; frames made under another profile fail their CRC.
    """
    if basis is None:
        from .transform.klt import profile_basis as _pb

        basis = _pb(profile)
    return _key_of(profile_digest(profile, _fingerprint(basis)))


def encode(samples, profile: Profile, gaps: str = "refuse", first_window: int = 0) -> EncodeResult:
    """Code ``samples`` (samples x channels) under ``profile``; every frame meets its budget.

    The target is checked on the reconstruction the decoder will produce, and
    any frame that misses it is re-quantized with a finer step until it holds.
    ``gaps`` is the policy for NaN samples (``codec.layouts.gapmask``: refuse, fill,
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
    check_magnitude(x, [c.name for c in profile.channels])
    n = profile.frame_length
    basis = profile_basis(profile)  # loads and hash-checks a trained basis
    frames, valid, channel, window = split_frames(x, n)
    mask = np.arange(n) < valid[:, None]
    resolution = np.array([c.resolution for c in profile.channels])[channel]
    peak = np.abs(np.where(mask, frames, 0.0)).max(axis=1)
    e_ref = reference_energy(frames, valid, profile.reference)
    budget = frame_budgets(e_ref, profile.fidelity, resolution, valid, peak, n)
    # Budget blocks: the windows of one channel in one frame (frame scope), else None
    # (every window its own budget, as before).  Gap-mask frames carry one window each.
    block = block_budget = None
    if (profile.fidelity_scope == "frame" and profile.layout_version >= 3
            and profile.windows_per_frame > 1 and not (gaps == "mark" and missing is not None)):
        block = budget_blocks(channel, window + first_window, profile.windows_per_frame)
        block_budget = block_budgets(e_ref, profile.fidelity, resolution, valid, peak, n, block)
    mean = None
    if profile.reference == "ac":
        mean = np.where(mask, frames, 0.0).sum(axis=1) / valid
    cx = basis.analyze(frames)
    dc = basis.analyze(np.ones(n))
    trellis = None  # layout 4: per frame, whether dependent quantization codes it
    if profile.layout_version == 1:
        offset = np.full(cx.shape[0], 0.5)
        code = choose_steps(cx, mean, dc, budget)
    elif block is not None:  # one step per budget block (layouts 3 and 4)
        code = choose_block_steps(cx, mean, dc, block, block_budget, RD_OFFSET_V3)
        offset = np.full(code.size, RD_OFFSET_V3)
    else:
        code, offset = _rate_fidelity_choice(cx, mean, dc, budget, n, profile.layout_version)

    slack_budget = budget if profile.layout_version >= 3 else None
    if block is not None:
        slack_budget = block_budget
    q, mean_int, _ = code_frame(cx, mean, dc, code, offset, slack_budget, block=block)
    if profile.layout_version == LAYOUT_VERSION_4:
        if block is None:
            q, mean_int, code, trellis = _quantizer_choice(cx, mean, dc, budget, q, mean_int,
                                                           code)
        else:
            q, mean_int, code, trellis = _block_quantizer_choice(
                cx, mean, dc, block, block_budget, q, mean_int, code)
    recon = reconstruct(q, mean_int, code, basis, trellis)
    err = _valid_error(frames, recon, mask)
    limit = _peak_limits(profile, channel)
    peak_mode = bool(np.isfinite(limit).any())

    def step_drop(rows: np.ndarray) -> np.ndarray:
        """Eighth-octave step codes by which each frame's step must shrink (0: it passes)."""
        if block is not None:
            return block_drop(rows)
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

    def block_drop(rows: np.ndarray) -> np.ndarray:
        """``step_drop`` for budget blocks: every row of a block moves with its block.

        ``rows`` holds whole blocks (all rows at first, then the rows of blocks
        that failed); the blocks' errors are summed over all their rows.
        """
        over = block_sums(err, block, block_budget.size) > block_budget * _MARGIN
        dropb = over.astype(np.int64)
        if peak_mode:
            pk = _valid_max_error(frames[rows], recon[rows], mask[rows])
            with np.errstate(over="ignore"):
                ratio = np.minimum(pk / limit[rows], 2.0**1000)
            est = np.ceil(8.0 * np.log2(np.maximum(ratio, 1.0))).astype(np.int64)
            np.maximum.at(dropb, block[rows], np.where(pk > limit[rows], np.maximum(est, 1), 0))
        return dropb[block[rows]]

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
        tb = None if trellis is None else trellis[bad]
        qb, mb = _requantize(cx[bad], None if mean is None else mean[bad], dc, code[bad],
                             offset[bad], tb)
        q[bad] = qb
        if mean_int is not None:
            mean_int[bad] = mb
        recon[bad] = reconstruct(qb, mb, code[bad], basis, tb)
        err[bad] = _valid_error(frames[bad], recon[bad], mask[bad])
        rows = bad
        drop = step_drop(rows)
        if not (drop > 0).any():
            # Synthesize all frames in one call, as the decoder does: BLAS may round a
            # subset differently from the whole batch, so the check is redone on this.
            recon = reconstruct(q, mean_int, code, basis, trellis)
            err = _valid_error(frames, recon, mask)
            rows = np.arange(code.size)
            drop = step_drop(rows)
    fidelity = np.where(e_ref > 0, 1.0 - err / np.where(e_ref > 0, e_ref, 1.0), 1.0)
    floor = budget > (1.0 - profile.fidelity) * e_ref
    if block is None:  # every window is its own budget block
        block, block_budget = np.arange(err.size), budget
    nb = block_budget.size
    block_ref = block_sums(e_ref, block, nb)
    block_err = block_sums(err, block, nb)
    block_fid = np.where(block_ref > 0, 1.0 - block_err / np.where(block_ref > 0, block_ref, 1.0),
                         1.0)
    block_met = block_err <= block_budget
    block_floor = block_budget > (1.0 - profile.fidelity) * block_ref
    x_hat, _ = merge_frames(recon, channel, window, x.shape[0], x.shape[1])
    fmiss = gap_rows = None
    if missing is not None and gaps == "mark":
        fmiss = split_frames(missing.astype(np.float64), n)[0] > 0
        gap_rows = fmiss.any(axis=1)
    if profile.layout_version == 1:
        kept = q != 0
        batch = FrameBatch(
            channel=channel, sequence=window + first_window,
            basis=np.full(channel.size, basis.code),
            step_code=code, valid=valid, has_mean=mean_int is not None,
            mean=mean_int if mean_int is not None else np.zeros(channel.size, np.int64),
            terms=kept.sum(axis=1), term_index=np.nonzero(kept)[1], term_value=q[kept],
        )
        data, lengths = pack_frames(batch, profile_id(profile), n, key=frame_key(profile, basis))
        frame_bits = lengths * 8
        header_bits = int(frame_bits.sum()) - int(_v1_term_bits(batch, n))
        row_frame = np.arange(channel.size)
    elif profile.layout_version == 2:
        data, frame_bits, header_bits = _pack_v2(profile, channel, window + first_window,
                                                 valid, code, mean_int, q, n,
                                                 frame_key(profile, basis))
        row_frame = (np.unique(window, return_inverse=True)[1] if profile.multi_channel_frames
                     else np.arange(channel.size))
    else:
        # gap-mask frames wrap the data frame of one window: windows with a gap travel
        # one per frame, the runs between them keep sharing headers
        groups = None if gap_rows is None else _gap_groups(
            window, channel, gap_rows, profile.windows_per_frame, x.shape[1],
            profile.multi_channel_frames)
        data, frame_bits, header_bits, row_frame = _pack_v3(
            profile, channel, window + first_window, valid, code, mean_int, q, n, trellis,
            groups, key=frame_key(profile, basis))
    extra_bits = 0
    if gap_rows is not None:
        data, dropped, extra_bits = _add_gap_frames(
            data, row_frame, fmiss, gap_rows, channel, window + first_window, valid,
            profile_id(profile), n, frame_key(profile, basis))
        frame_bits = np.where(dropped, 0, frame_bits)
    info = {
        "channel": channel, "window": window, "bits": frame_bits, "terms": (q != 0).sum(axis=1),
        "step_code": code, "error_energy": err, "budget": budget,
        "reference_energy": e_ref, "fidelity": fidelity, "met": block_met[block],
        "floor": floor,
        "max_abs_error": _valid_max_error(frames, recon, mask),
        # the budget the promise holds for: one per block (window scope: per window)
        "block": block, "block_budget": block_budget, "block_reference_energy": block_ref,
        "block_error_energy": block_err, "block_fidelity": block_fid, "block_met": block_met,
        "block_floor": block_floor,
    }
    # The report judges every row by its budget block (in window scope: by itself).
    report = encode_report(x, x_hat, profile, EncodeTally(
        frame_bits=frame_bits, frame_channel=channel, frame_block=block,
        window_fidelity=fidelity, window_floor=floor, block_fidelity=block_fid,
        block_met=block_met, block_floor=block_floor,
        frames_on_wire=int(np.unique(row_frame).size),
        frames_trellis=0 if trellis is None else int(trellis.sum()), gap_policy=gaps,
        samples_gap=0 if missing is None else int(missing.sum()),
        extra_bits=extra_bits, header_bits=header_bits))
    if missing is not None and gaps == "mark":
        x_hat = np.where(missing, np.nan, x_hat)  # what the receiver reproduces
    return EncodeResult(data, profile, x_hat, info, report)


def _add_gap_frames(data: bytes, row_frame: np.ndarray, fmiss: np.ndarray, has_gap: np.ndarray,
                    channel: np.ndarray, sequence: np.ndarray, valid: np.ndarray, pid: int,
                    n: int, key: FrameKey) -> tuple[bytes, np.ndarray, int]:
    """Wrap every data frame holding a gap in a gap-mask frame (``codec.layouts.gapmask``).

    ``row_frame`` maps each row (one window of one channel) to its data frame
    (several rows share a multi-channel frame).  A window whose rows are all
    gap sends the masks alone.  Returns the new stream, which rows lost their
    data frame, and the bits the gap-mask frames add.
    """
    loc = locate_frames(data, key)  # our own clean stream: one entry per data frame
    nframes = loc.offsets.size
    full = (fmiss & (np.arange(n) < valid[:, None])).sum(axis=1) == valid
    all_gap = np.ones(nframes, dtype=bool)
    np.logical_and.at(all_gap, row_frame, full)
    masks: list[list] = [[] for _ in range(nframes)]
    for r in np.flatnonzero(has_gap).tolist():  # rows with gaps only
        masks[row_frame[r]].append((int(channel[r]), fmiss[r]))
    first = np.unique(row_frame, return_index=True)[1]  # each frame's first row
    pieces: list[bytes] = []
    extra = 0
    mv = memoryview(data)
    for f, (o, ln) in enumerate(zip(loc.offsets.tolist(), loc.lengths.tolist())):
        frame = mv[o : o + ln]
        if not masks[f]:
            pieces.append(frame)
            continue
        r = first[f]
        # the inner frame is signed with the inner key: found alone, it fails its CRC
        inner = b"" if all_gap[f] else _resign(bytes(frame), key.inner())
        g = pack_gap_frame(pid, int(sequence[r]), int(valid[r]), masks[f], inner, n, key)
        pieces.append(g)
        extra += 8 * (len(g) - len(inner))
    return b"".join(pieces), all_gap[row_frame], extra


def _resign(frame: bytes, key: FrameKey) -> bytes:
    """``frame`` with its CRC recomputed under ``key``."""
    from .layouts.crc import crc16_ibm3740

    crc = crc16_ibm3740(key.prefix(len(frame)) + frame[len(SYNC) : -2])
    return frame[:-2] + crc.to_bytes(2, "big")


def _v1_term_bits(batch: FrameBatch, n: int) -> int:
    """Bits of the v1 payload that carry terms and the mean (the rest is header)."""
    from .entropy.bits import signed_width

    terms = batch.terms.astype(np.int64)
    vw = np.zeros(terms.size, np.int64)
    if batch.term_value.size:
        starts = np.cumsum(terms) - terms
        nz = terms > 0
        vw[nz] = np.maximum.reduceat(signed_width(batch.term_value[:, None]), starts[nz])
    mw = signed_width(batch.mean[:, None]) if batch.has_mean else np.zeros(terms.size, np.int64)
    return int((mw + terms * (index_bits(n) + vw)).sum())


def _pack_v2(profile: Profile, channel, window, valid, code, mean_int, q, n, key):
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
        parts.append(pack_frames_v2(batch, pid, n, key=key))
    data = b"".join(p[0] for p in parts)
    lengths, sub_bits, side_bits = (np.concatenate([p[i] for p in parts]) for i in (1, 2, 3))
    cnt = np.bincount(frame, minlength=first.size)
    overhead = lengths * 8 - np.add.reduceat(sub_bits, first)
    bits = sub_bits + (overhead // cnt)[frame]
    bits[first] += overhead - (overhead // cnt) * cnt
    coef_bits = sub_bits - side_bits
    return data, bits, int(lengths.sum() * 8 - coef_bits.sum())


def _gap_groups(window: np.ndarray, channel: np.ndarray, gap_rows: np.ndarray, w: int,
                channels: int, multi: bool) -> np.ndarray:
    """Frame group of each row: a window with a gap alone, the runs between in groups of ``w``.

    Per channel (each channel has its own frames), or per window when one frame
    carries every channel.  Groups are numbered by their first window, then
    channel, so frames stay in time order on the wire.
    """
    nwin = int(window.max()) + 1
    cols = 1 if multi else channels
    col = np.zeros_like(channel) if multi else channel
    gap = np.zeros((nwin, cols), dtype=bool)
    gap[window[gap_rows], col[gap_rows]] = True
    start = gap | np.vstack([np.ones((1, cols), bool), gap[:-1]])  # at a gap, right after one
    idx = np.arange(nwin)[:, None]
    run_first = np.maximum.accumulate(np.where(start, idx, 0), axis=0)
    chunk_start = run_first + (idx - run_first) // w * w  # first window of each row's group
    key = chunk_start * cols + np.arange(cols)[None, :]
    return np.unique(key, return_inverse=True)[1].reshape(nwin, cols)[window, col]


def _pack_v3(profile: Profile, channel, window, valid, code, mean_int, q, n, trellis=None,
             groups=None, *, key: FrameKey):
    """Layout v3 frames: (bytes, bits per row, header bits of the stream, frame of each row).

    Header bits are everything but the range-coded coefficient bytes.  ``groups``
    (optional) gives each row's frame group of consecutive windows; by default
    windows go ``windows_per_frame`` at a time.
    """
    multi = profile.multi_channel_frames
    w = profile.windows_per_frame
    channels = len(profile.channels)
    group = window // w if groups is None else groups
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
            mean=None if mean_int is None else mean_int[rows], q=q[rows],
            quantizer=None if trellis is None else trellis[rows])
        parts.append(pack_frames_v3(batch, pid, n, channels, profile.layout_version, key=key))
    data = b"".join(p[0] for p in parts)
    lengths, sub_bits, lane_len = (np.concatenate([p[i] for p in parts]) for i in (1, 2, 3))
    cnt = np.bincount(frame, minlength=first.size)
    bits_sorted = np.repeat(lengths * 8 // cnt, cnt)
    bits_sorted[first] += lengths * 8 - (lengths * 8 // cnt) * cnt
    bits = np.empty_like(bits_sorted)
    bits[order] = bits_sorted
    row_frame = np.empty_like(frame)
    row_frame[order] = frame
    return data, bits, int(lengths.sum() * 8 - lane_len.sum() * 8), row_frame


def _requantize(cx, mean, dc, code, offset, trellis):
    """Codes of frames at a given step, each with its own quantizer (the closed loop)."""
    q, mean_int, _ = code_frame(cx, mean, dc, code, offset)
    if trellis is not None and trellis.any():
        t = np.flatnonzero(trellis)
        qt, mt, _ = code_frame(cx[t], None if mean is None else mean[t], dc, code[t],
                               trellis=True)
        q[t] = qt
        if mean_int is not None:
            mean_int[t] = mt
    return q, mean_int


def _quantizer_choice(cx, mean, dc, budget, q, mean_int, code):
    """Layout 4: per frame, scalar codes or dependent quantization, whichever costs fewer bits.

    Both meet the frame's budget (the trellis step is searched like the scalar
    one, from the scalar step as a hint); the cost is the range coder's ideal
    code length of the coefficients.  Returns the chosen codes, mean codes,
    step codes and the per-frame trellis flag.
    """
    code_t = choose_steps(cx, mean, dc, budget, hint=code, trellis=True)
    q_t, mean_t, _ = code_frame(cx, mean, dc, code_t, budget=budget, trellis=True)
    use = (coefficient_cost_bits(q_t, trellis=True) + _mean_bits(mean_t)
           < coefficient_cost_bits(q) + _mean_bits(mean_int))
    q = np.where(use[:, None], q_t, q)
    if mean_int is not None:
        mean_int = np.where(use, mean_t, mean_int)
    return q, mean_int, np.where(use, code_t, code), use


def _block_quantizer_choice(cx, mean, dc, block, budget, q, mean_int, code):
    """Layout 4 in frame scope: per budget block, scalar codes or dependent quantization.

    As :func:`_quantizer_choice` with one step per block for either quantizer
    (the trellis step found by the block bisection; the block's leftover budget
    shared evenly by its windows and spent by dropping trailing levels); the
    cheaper of the two, summed over the block, codes the block.
    """
    nb = budget.size
    code_t = choose_block_steps(cx, mean, dc, block, budget, trellis=True)
    err_t = code_frame(cx, mean, dc, code_t, trellis=True)[2]
    share = np.maximum(budget - block_sums(err_t, block, nb), 0.0) / np.bincount(block,
                                                                                 minlength=nb)
    q_t, mean_t, _ = code_frame(cx, mean, dc, code_t, budget=err_t + share[block],
                                trellis=True)
    cost_t = block_sums(coefficient_cost_bits(q_t, trellis=True) + _mean_bits(mean_t),
                        block, nb)
    cost_s = block_sums(coefficient_cost_bits(q) + _mean_bits(mean_int), block, nb)
    use = (cost_t < cost_s)[block]
    q = np.where(use[:, None], q_t, q)
    if mean_int is not None:
        mean_int = np.where(use, mean_t, mean_int)
    return q, mean_int, np.where(use, code_t, code), use


def _mean_bits(mean_int):
    """Bits of the exp-Golomb coded mean codes (0 when no mean is sent)."""
    return 0 if mean_int is None else exp_golomb_bits(zigzag(mean_int))


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
    if version >= 3:
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


@dataclass
class FrameRows:
    """CRC-valid frames interpreted under a profile (the decode half's per-frame step).

    Per frame, in arrival order: ``kind`` (0 data, 1 gap mask), ``verdict``
    (``"ok"`` or a short key saying why the frame is refused; ``detail`` says
    it in words), ``crc``, ``sequence`` and its ``modulus`` (the layout's
    sequence range), ``valid`` and a few header fields in ``head`` for the
    frame table.  Per row (one window of one channel; a multi-channel frame
    has several): ``row_frame``, ``row_channel``, ``row_flags`` and the decoded
    ``rows`` (NaN for refused frames).  ``masks`` holds the ``(channel, mask)``
    pairs of each accepted gap-mask frame, by frame index; the rows of its
    inner data frame, if any, belong to the same frame index.
    """

    kind: np.ndarray
    verdict: list
    detail: list
    crc: np.ndarray
    sequence: np.ndarray
    modulus: np.ndarray
    valid: np.ndarray
    head: dict
    row_frame: np.ndarray
    row_channel: np.ndarray
    row_flags: np.ndarray
    rows: np.ndarray
    masks: dict
    row_offset: np.ndarray = None  # window of each row minus its frame's window (v3: 0..15)
    row_valid: np.ndarray = None  # real samples of each row's window


_HEAD_KEYS = ("basis", "terms", "step_code")


def decode_frames(frames: list[bytes], profile: Profile, basis: Basis) -> FrameRows:
    """Interpret CRC-valid frames; a foreign or impossible frame becomes a verdict, never an error.

    Every length and count read from the wire is checked against the profile
    before use: v1 terms <= N, widths <= 57 bits, valid in 1..N, term index < N
    and the length field equal to the length the fields imply, all before any
    payload field is read; v2 coefficient counts <= N and the coded contents
    filling the frame exactly (checked by the v2 parser); gap masks by
    :func:`codec.layouts.gapmask.parse_gap_frame`.
    """
    n = profile.frame_length
    channels = len(profile.channels)
    nf = len(frames)
    lengths = np.fromiter((len(f) for f in frames), dtype=np.int64, count=nf)
    offsets = np.cumsum(lengths) - lengths
    joined = b"".join(frames)
    buf = np.frombuffer(joined, dtype=np.uint8)
    version = (buf[offsets + len(SYNC)] >> 4).astype(np.int64)
    crc = (buf[offsets + lengths - 2].astype(np.int64) << 8) | buf[offsets + lengths - 1]
    kind = np.where(version == GAP_KIND, 1, 0)
    verdict = ["ok"] * nf
    detail = [""] * nf
    ok = np.ones(nf, dtype=bool)  # mirror of verdict == "ok", for whole-array selection
    sequence = np.zeros(nf, np.int64)
    modulus = np.where((version == LAYOUT_VERSION_2) | (version == LAYOUT_VERSION_3)
                       | (version == LAYOUT_VERSION_4),
                       1 << SEQUENCE_BITS_V2, 65536)
    # A gap-mask frame's rows and masks are keyed by its own 16-bit sequence number.
    valid = np.zeros(nf, np.int64)
    head = {k: np.zeros(nf, dtype=np.int64) for k in _HEAD_KEYS}
    pid = profile_id(profile)
    key = frame_key(profile, basis)

    def refuse(idx: np.ndarray, bad: np.ndarray, key: str, words) -> None:
        for f in idx[bad & ok[idx]].tolist():  # only the refused frames, usually none
            ok[f] = False
            verdict[f] = key
            detail[f] = words(f) if callable(words) else words

    # Rows: one per v1 / gap frame, one per subframe of a v2 frame (filled below).
    parts: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = []

    v1 = np.flatnonzero(version == LAYOUT_VERSION)
    if v1.size:
        h = parse_headers(buf, offsets[v1])
        sequence[v1], valid[v1] = h["sequence"], h["valid"]
        for k in _HEAD_KEYS:
            head[k][v1] = h[k]
        refuse(v1, h["profile"] != pid, "foreign_profile",
               lambda f: f"made under another profile (id {int(h['profile'][v1 == f][0]):#06x}, "
                         f"not {pid:#06x})")
        refuse(v1, h["flags"] != 0, "bad_header", "reserved flags set")
        refuse(v1, h["channel"] >= channels, "bad_header",
               f"channel not in the profile ({channels} channels)")
        refuse(v1, h["basis"] != basis.code, "bad_header",
               f"basis code differs from the profile's {basis.name!r}")
        refuse(v1, h["terms"] > n, "bad_header", f"claims more terms than the {n} of a frame")
        refuse(v1, (h["value_width"] > MAX_FIELD_BITS) | (h["mean_width"] > MAX_FIELD_BITS),
               "bad_header", f"a field width exceeds {MAX_FIELD_BITS} bits")
        refuse(v1, (h["valid"] < 1) | (h["valid"] > n), "bad_header",
               f"valid samples outside 1..{n}")
        refuse(v1, (h["mean_width"] > 0) != (profile.reference == "ac"), "bad_header",
               "mean field does not match the profile's reference")
        # Only now, with terms and widths bounded, is the implied length safe to compute.
        sane = ok[v1]
        implied = np.where(sane, expected_length({k: np.where(sane, v, 0) for k, v in h.items()},
                                                 n), h["length"])
        refuse(v1, implied != h["length"], "bad_header", "length field does not match contents")
        rows = np.full((v1.size, n), np.nan)
        good = ok[v1]
        if good.any():
            gh = {k: v[good] for k, v in h.items()}
            mean, index, value = parse_payloads(buf, offsets[v1[good]], gh, n)
            owner = np.repeat(np.arange(int(good.sum())), gh["terms"])
            badidx = np.zeros(int(good.sum()), dtype=bool)
            badidx[owner[index >= n]] = True
            refuse(v1[good], badidx, "bad_header",
                   f"a term index is not below the frame length {n}")
            q = np.zeros((int(good.sum()), n), dtype=np.int64)
            ok_t = ~badidx[owner]
            q[owner[ok_t], index[ok_t]] = value[ok_t]
            mean_int = (np.where(gh["mean_width"] > 0, mean, 0) if profile.reference == "ac"
                        else None)
            recon = reconstruct(q, mean_int, gh["step_code"], basis)
            recon[badidx] = np.nan
            rows[good] = recon
        parts.append((v1, np.minimum(h["channel"], 255), h["flags"], rows,
                      np.zeros(v1.size, np.int64), h["valid"]))

    # Layouts 2 to 4 share their header checks; 3 and 4 may carry several windows per frame.
    for number, parse in ((LAYOUT_VERSION_2, parse_frames_v2), (LAYOUT_VERSION_3, parse_frames_v3),
                          (LAYOUT_VERSION_4, partial(parse_frames_v3, version=LAYOUT_VERSION_4))):
        vi = np.flatnonzero(version == number)
        if not vi.size:
            continue
        # The profile byte sits at byte 4 (11-bit length) or 6 (27-bit length): checked
        # before the parser reads or allocates anything for the frame.
        pid8 = pid & ((1 << PROFILE_BITS_V2) - 1)
        pbyte = buf[offsets[vi] + np.where(buf[offsets[vi] + len(SYNC)] & 0x08, 6, 4)]
        refuse(vi, pbyte != pid8, "foreign_profile",
               lambda f, pb=pbyte, vi=vi, pid8=pid8: f"made under another profile (id byte "
               f"{int(pb[vi == f][0]):#04x}, not {pid8:#04x})")
        vi = vi[ok[vi]]
        if not vi.size:
            continue
        p = parse(joined, offsets[vi], lengths[vi], n, channels, profile.reference == "ac")
        sequence[vi], valid[vi] = p["sequence"], p["valid"]
        head["basis"][vi] = basis.code
        np.add.at(head["terms"], vi[p["frame"]], (p["q"] != 0).sum(axis=1))
        # A frame of several windows has one step each: inspect shows the coarsest.
        np.maximum.at(head["step_code"], vi[p["frame"]], p["step_code"])
        refuse(vi, p["valid"] > n, "bad_header", f"valid samples outside 1..{n}")
        bad_ch = np.zeros(vi.size, dtype=bool)
        np.logical_or.at(bad_ch, p["frame"], p["channel"] >= channels)
        refuse(vi, bad_ch, "bad_header", f"channel not in the profile ({channels} channels)")
        refuse(vi, ~p["consumed_ok"], "bad_header",
               "contents do not fill the length field exactly")
        good = ok[vi][p["frame"]]
        rows = np.full((p["q"].shape[0], n), np.nan)
        if good.any():
            rows[good] = reconstruct(p["q"][good], None if p["mean"] is None else p["mean"][good],
                                     p["step_code"][good], basis,
                                     None if p.get("trellis") is None else p["trellis"][good])
        window_offset = p.get("window_offset", np.zeros(p["frame"].size, np.int64))
        sub_valid = p.get("sub_valid", p["valid"][p["frame"]])
        parts.append((vi[p["frame"]], np.minimum(p["channel"], 255),
                      np.zeros(p["frame"].size, np.int64), rows, window_offset, sub_valid))

    masks: dict[int, list] = {}
    for f in np.flatnonzero(kind == 1).tolist():  # gap-mask frames are rare: one parse each
        parsed = parse_gap_frame(frames[f], n, channels)
        if isinstance(parsed, str):
            ok[f], verdict[f], detail[f] = False, "bad_header", parsed
            continue
        gh, fmasks, inner = parsed
        sequence[f], valid[f] = gh["sequence"], gh["valid"]
        if gh["profile"] != pid:
            ok[f], verdict[f] = False, "foreign_profile"
            detail[f] = f"gap frame of profile {gh['profile']:#06x}"
            continue
        masks[f] = fmasks
        if not inner:
            continue
        why = _inner_problem(inner, key.inner())
        sub = None if why else decode_frames([inner], profile, basis)
        if sub is not None and sub.verdict[0] != "ok":
            why = sub.detail[0] or sub.verdict[0]
        elif sub is not None and (sub.valid[0] != gh["valid"] or
                                  (gh["sequence"] - sub.sequence[0]) % sub.modulus[0]):
            why = "inner frame is not of the gap frame's window"
        if why:
            ok[f], verdict[f], detail[f] = False, "bad_header", f"gap frame: {why}"
            del masks[f]
            continue
        parts.append((np.full(sub.rows.shape[0], f), sub.row_channel, sub.row_flags, sub.rows,
                      sub.row_offset, sub.row_valid))
        for k in _HEAD_KEYS:
            head[k][f] = sub.head[k][0]

    if parts:
        rf, rc, rfl, rr, ro, rv = (np.concatenate(c) for c in zip(*parts))
        order = np.argsort(rf, kind="stable")  # rows in frame order
        rf, rc, rfl, rr, ro, rv = rf[order], rc[order], rfl[order], rr[order], ro[order], \
            rv[order]
    else:
        rf = rc = rfl = ro = rv = np.zeros(0, np.int64)
        rr = np.zeros((0, n))
    return FrameRows(kind, verdict, detail, crc, sequence, modulus, valid, head, rf, rc, rfl,
                     rr, masks, ro, rv)


def _inner_problem(inner: bytes, key: FrameKey) -> str:
    """Why the bytes inside a gap-mask frame are not one whole, CRC-valid data frame ('' if ok)."""
    mv = memoryview(inner)
    length = frame_extent(mv, 0)
    if length is None or length != len(inner) or (inner[len(SYNC)] >> 4) == GAP_KIND:
        return "inner bytes are not one data frame"
    if not frame_crc_ok(mv, 0, length, key):
        return "inner frame fails its CRC"
    return ""


def decode(data: bytes, profile: Profile, samples: int | None = None,
           reorder: int = 16, strict: bool = True, max_fill: int | None = None
           ) -> DecodeResult:
    """Decode a whole stream made under ``profile`` (bound: one channel spec per column).

    The same machine as the streaming decoder (:class:`codec.stream.live.StreamDecoder`)
    fed the whole stream at once, so both give identical results.  Frames whose
    CRC fails never reach the output; foreign, damaged, duplicated or late
    frames become events in the result, not errors.  ``samples`` (the stream
    note's count) fixes the output length; without it the stream runs to the
    last frame received, and ``end_known`` says whether that end is certain;
    then a sequence jump adds at most ``max_fill`` lost windows (default
    ``codec.stream.live.MAX_FILL_WINDOWS``) and the rest is a ``discontinuity``
    event.

    Raises :class:`ProfileError` when the profile lists no channels and, when
    ``strict``, :class:`FrameError` when not one frame was accepted (saying
    why: no frame at all, or frames of another profile).  With ``strict``
    False such a stream gives an all-lost result and its counts.
    """
    from .stream.live import StreamDecoder  # the streaming module builds on this one

    dec = StreamDecoder(profile, samples=samples, reorder=reorder, keep_frames=True,
                        max_fill=max_fill)
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
    raise FrameError("no frame with a valid sync marker and CRC was found (frames made under "
                     "another profile fail their CRC too); give a coefwire stream and the "
                     "profile it was encoded with")
