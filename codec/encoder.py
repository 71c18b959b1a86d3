"""The encoder: samples -> windows -> coefficients -> codes -> frames, on all windows at once.

Each stage lives in its own module (transform, quantize, entropy, layouts);
this module wires them together.  The frame layout is a registered
:class:`codec.layouts.registry.Layout` looked up by the profile's version
number: the encoder asks it how to choose codes and how to pack them, and
never branches on the number itself.  Decoding lives in :mod:`codec.stream`
(:mod:`codec.stream.frames` per frame, :mod:`codec.stream.decode` whole streams).
"""

from __future__ import annotations

import dataclasses
import functools
from dataclasses import dataclass

import numpy as np

from ._errors import InputError, ProfileError
from ._profile import Profile, profile_digest, profile_id
from .entropy.rangecoder import coefficient_cost_bits
from .entropy.rice import exp_golomb_bits, zigzag
from .layouts.envelope import FrameKey
from .layouts.gapmask import GAP_POLICIES, fill_gaps, pack_gap_frame
from .layouts.registry import CodedFrames, PackedFrames, layout_for
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
from .stream.search import locate_frames
from .transform.bases import Basis, alternate_basis, basis_fingerprint, has_alternate_basis
from .transform.framing import merge_frames, split_frames
from .transform.klt import profile_basis
from .transform.predict import (
    add_predictions,
    choose_lags,
    predictable,
    prediction_index,
)

__all__ = ["EncodeResult", "encode", "frame_key", "as_samples", "reconstruct"]


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

    Examples
    --------
    Every budget block meets its target, and the reconstruction is what the
    decoder returns, bit for bit:

    >>> import numpy as np, codec
    >>> x = np.cumsum(np.random.default_rng(0).standard_normal((1024, 2)), axis=0)
    >>> enc = codec.encode(x, codec.default_profile())
    >>> bool(enc.frames["block_met"].all()), [c.name for c in enc.profile.channels]
    (True, ['ch0', 'ch1'])
    >>> dec = codec.decode(enc.data, enc.profile, samples=1024)
    >>> bool(np.array_equal(dec.samples, enc.reconstruction))
    True
    """

    data: bytes
    profile: Profile
    reconstruction: np.ndarray
    frames: dict
    report: dict


def as_samples(samples, where: str = "input", allow_gaps: bool = False) -> np.ndarray:
    """Validate and convert samples to a C-contiguous float64 (samples x channels) array.

    NaN and infinite samples are refused unless ``allow_gaps`` (a gap policy handles them).

    Parameters
    ----------
    samples : array_like
        1-D (one channel) or 2-D (samples x channels) numbers.
    where : str
        Where the samples came from, for messages.
    allow_gaps : bool
        Accept NaN and infinite samples.

    Returns
    -------
    ndarray of float64, shape (samples, channels)
        C-contiguous.

    Raises
    ------
    InputError
        For non-numeric, empty, 3-D or (without ``allow_gaps``) non-finite samples.

    Examples
    --------
    >>> as_samples([1, 2, 3]).shape
    (3, 1)
    >>> as_samples([[1.0], [float("nan")]])
    Traceback (most recent call last):
    ...
    codec._errors.InputError: input: sample 1 of channel 0 is nan (1 non-finite values ...
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
                basis: Basis, trellis: bool = False,
                alternate: np.ndarray | None = None) -> np.ndarray:
    """Frames from integer codes: the one synthesis both ends run.

    ``trellis`` (a bool, or one per row): rows of levels of dependent
    quantization (layout 4).  ``alternate`` (one bool per row): rows coded on
    :func:`codec.transform.bases.alternate_basis` (layout 6).

    Parameters
    ----------
    q : ndarray of int, shape (frames, n)
        Quantized coefficients (or trellis levels).
    mean_int : ndarray of int, optional
        Integer means of the ``ac`` reference, one per frame.
    code : ndarray of int
        Step code per frame (step 2**((code - 512) / 8)).
    basis : Basis
        The basis.
    trellis : bool or ndarray of bool
        Rows of dependent-quantization levels.
    alternate : ndarray of bool, optional
        Rows synthesized on the alternate basis instead of ``basis``.

    Returns
    -------
    ndarray, shape (frames, n)
        The frames.

    Examples
    --------
    Coefficient 0 of the DCT is the constant row 1/sqrt(N): a code of 2 at step
    1 (code 512) gives 2 / sqrt(4) = 1 in every sample:

    >>> import numpy as np
    >>> from codec import as_basis
    >>> reconstruct(np.array([[2, 0, 0, 0]]), None, np.array([512]), as_basis("dct", 4))
    array([[1., 1., 1., 1.]])
    """
    step = step_from_code(code)
    if np.any(trellis):
        rows = np.broadcast_to(np.asarray(trellis, dtype=bool), (q.shape[0],))
        q = q.astype(np.float64)
        q[rows] = dequantize_levels(q[rows].astype(np.int64))
    # einsum (not BLAS matmul): each row's sum runs in one fixed order whatever the
    # batch size, so a frame decodes bit-identically alone, in any batch, or in the
    # encoder's closed-loop check -- the streaming decoder relies on it.
    scaled = q.astype(np.float64) * step[:, None]
    frames = np.einsum("ij,jk->ik", scaled, basis.matrix)
    if alternate is not None and np.any(alternate):
        alt = alternate_basis(basis.code, basis.n)
        if alt is None:
            raise RuntimeError("rows on an alternate basis that this basis does not have")
        rows = np.asarray(alternate, dtype=bool)
        frames[rows] = np.einsum("ij,jk->ik", scaled[rows], alt.matrix)
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

    Parameters
    ----------
    profile : Profile
        The stream's profile.
    basis : Basis, optional
        Its basis, when already built.

    Returns
    -------
    FrameKey
        The CRC start values for frames of this profile.

    Examples
    --------
    >>> import numpy as np, codec
    >>> enc = codec.encode(np.zeros((64, 1)), codec.default_profile())
    >>> other = enc.profile.model_copy(update={"fidelity": 0.9})
    >>> len(codec.locate_frames(enc.data, frame_key(enc.profile)).frames)
    1
    >>> len(codec.locate_frames(enc.data, frame_key(other)).frames)
    0
    """
    if basis is None:
        from .transform.klt import profile_basis as _pb

        basis = _pb(profile)
    return _key_of(profile_digest(profile, _fingerprint(basis)))


def encode(samples, profile: Profile, gaps: str = "refuse", first_window: int = 0) -> EncodeResult:
    """Code ``samples`` under ``profile``; every budget block meets its fidelity budget.

    The target is checked on the reconstruction the decoder will produce, and
    any frame that misses it is re-quantized with a finer step until it holds.
    The frame layout (``profile.layout_version``, a registered
    :class:`codec.layouts.registry.Layout`) chooses the codes and packs them.

    Parameters
    ----------
    samples : array_like
        Samples x channels (a 1-D array is one channel); finite numbers unless
        ``gaps`` allows NaN.
    profile : Profile
        The coding profile; an unbound one is bound to ``ch0``, ``ch1``, ...
    gaps : {"refuse", "fill", "mark"}
        Policy for NaN samples (:mod:`codec.layouts.gapmask`): refuse them,
        fill them by interpolation, or fill and mark them in gap-mask frames.
    first_window : int
        Number of the first time window (the streaming encoder codes a live
        stream block by block).

    Returns
    -------
    EncodeResult
        The bytes, the bound profile, the reconstruction a decoder will
        produce, per-frame figures and the JSON report.

    Raises
    ------
    InputError
        Samples that are not a non-empty numeric 2-D array, NaN under the
        ``refuse`` policy, or a peak-error limit no step can meet.
    ProfileError
        A bound profile whose channel count differs from the input's.

    Examples
    --------
    >>> import numpy as np, codec
    >>> x = np.sin(np.arange(256) / 9.0)[:, None]
    >>> enc = codec.encode(x, codec.Profile(frame_length=64, fidelity=0.99))
    >>> enc.report["fidelity_min"] >= 0.99
    True
    >>> bool(np.allclose(codec.decode(enc.data, enc.profile).samples, enc.reconstruction))
    True
    """
    x, missing = _gap_input(samples, gaps)
    profile = _bind(profile, x.shape[1])
    check_magnitude(x, [c.name for c in profile.channels])
    layout = layout_for(profile.layout_version)
    basis = profile_basis(profile)  # loads and hash-checks a trained basis
    w = _windows(x, profile, layout, basis, first_window, frame_scope=True)
    q, mean_int, code, offset, trellis = _choose(w, layout)
    recon, err = _closed_loop(w, basis, q, mean_int, code, offset, trellis)
    n = profile.frame_length
    fmiss, empty = _gap_windows(missing, w.valid, n)
    gap_rows = alt = None
    if getattr(layout, "predicts", False) and w.block is not None:
        alt = _predicted(w, basis, q, code, offset, first_window, empty)
    if missing is not None and gaps == "mark":
        gap_rows = fmiss.any(axis=1)
        # a window of nothing but gaps is never shown: its coefficients need not be sent
        # (its block is never predicted, so no window is predicted from it)
        q[empty] = 0
        if mean_int is not None:
            mean_int[empty] = 0
    key = frame_key(profile, basis)
    coded = _coded(w, profile, layout, basis, first_window, q, mean_int, code, trellis,
                   alt is not None)
    packed = layout.pack(coded, key)
    if alt is not None:
        packed, coded, recon, err = _keep_cheaper(layout, key, coded, packed, alt, w, basis,
                                                  recon, err)
        q, mean_int, code = coded.q, coded.mean, coded.step_code
    data, frame_bits, extra_bits = packed.data, packed.row_bits, 0
    if gap_rows is not None:
        data, extra_bits = _add_gap_frames(data, packed.row_frame, fmiss, gap_rows, w.valid,
                                           key)
    return _encode_result(x, profile, w, q, code, trellis, recon, err, data, frame_bits,
                          packed.header_bits, packed.row_frame, extra_bits, gaps, missing)


def _coded(w: _Windows, profile: Profile, layout, basis: Basis, first_window: int, q, mean_int,
           code, trellis, predicted: bool) -> CodedFrames:
    """What the layout packs (``lag`` all 0 when some block may be predicted, else None)."""
    return CodedFrames(
        channel=w.channel, sequence=w.window + first_window, valid=w.valid, step_code=code,
        mean=mean_int, q=q, profile_id=profile_id(profile), n=profile.frame_length,
        channels=len(profile.channels), basis_code=basis.code,
        multi=profile.multi_frames, windows_per_frame=layout.windows_per_frame(profile),
        trellis=trellis, lag=np.zeros(code.size, np.int64) if predicted else None,
        alternate=_alternate_rows(w, layout, basis))


def _alternate_rows(w: _Windows, layout, basis: Basis) -> np.ndarray | None:
    """What layout 6 packs of the basis switch: every row's flag, or None where it has none."""
    if not getattr(layout, "switches_basis", False) or not has_alternate_basis(basis.code,
                                                                                basis.n):
        return None
    return np.zeros(w.valid.size, bool) if w.alternate is None else w.alternate


def _gap_windows(missing: np.ndarray | None, valid: np.ndarray, n: int):
    """Per window, the mask of its gaps and whether it holds nothing but gaps (None, None
    without gaps)."""
    if missing is None:
        return None, None
    fmiss = split_frames(missing.astype(np.float64), n)[0] > 0
    return fmiss, (fmiss & (np.arange(n) < valid[:, None])).sum(axis=1) == valid


def _encode_result(x, profile, w, q, code, trellis, recon, err, data, frame_bits, header_bits,
                   row_frame, extra_bits, gaps, missing) -> EncodeResult:
    """Per-frame figures, budget-block figures and the report of a coded stream."""
    channel, window, block, block_budget = w.channel, w.window, w.block, w.block_budget
    budget, e_ref, frames, mask = w.budget, w.e_ref, w.frames, w.mask
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
                    valid: np.ndarray, key: FrameKey) -> tuple[bytes, int]:
    """Wrap every data frame holding a gap in a gap-mask frame (``codec.layouts.gapmask``).

    ``row_frame`` maps each row (one window of one channel) to its data frame;
    a frame carries its rows in row order (window by window, channel by
    channel), which is the order of the samples its runs index.  Returns the
    new stream and the bits the gap-mask frames add.
    """
    loc = locate_frames(data, key)  # our own clean stream: one entry per data frame
    wrap = np.zeros(loc.offsets.size, dtype=bool)
    wrap[row_frame[has_gap]] = True
    pieces: list[bytes] = []
    extra = 0
    mv = memoryview(data)
    have = np.arange(fmiss.shape[1]) < valid[:, None]
    by_frame = np.argsort(row_frame, kind="stable")  # each frame's rows, in row order
    bounds = np.searchsorted(row_frame[by_frame], np.arange(wrap.size + 1)).tolist()
    for f, (o, ln) in enumerate(zip(loc.offsets.tolist(), loc.lengths.tolist())):
        frame = mv[o : o + ln]
        if not wrap[f]:
            pieces.append(frame)
            continue
        rows = by_frame[bounds[f] : bounds[f + 1]]  # frames with gaps only: one step each
        g = pack_gap_frame(bytes(frame), fmiss[rows][have[rows]], key)
        pieces.append(g)
        extra += 8 * (len(g) - ln)
    return b"".join(pieces), extra


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


def _gap_input(samples, gaps: str) -> tuple[np.ndarray, np.ndarray | None]:
    """Samples as a float array and the mask of their gaps (None without any), by policy."""
    if gaps not in GAP_POLICIES:
        raise InputError(f"unknown gap policy {gaps!r}; choose one of {', '.join(GAP_POLICIES)}")
    if gaps == "refuse":
        return as_samples(samples), None
    x, missing = fill_gaps(as_samples(samples, allow_gaps=True), empty=gaps == "mark")
    return x, (missing if missing.any() else None)


@dataclass(frozen=True)
class _Windows:
    """The input cut into windows (rows), their budgets and their transform coefficients.

    ``block`` / ``block_budget``: the budget block of each row and each
    block's budget when several windows share one (frame scope), else None.
    """

    frames: np.ndarray
    valid: np.ndarray
    channel: np.ndarray
    window: np.ndarray
    mask: np.ndarray
    e_ref: np.ndarray
    budget: np.ndarray
    block: np.ndarray | None
    block_budget: np.ndarray | None
    mean: np.ndarray | None
    cx: np.ndarray
    dc: np.ndarray
    limit: np.ndarray
    #: Rows coded on the alternate basis (layout 6; ``cx`` holds their coefficients
    #: on it), or None.
    alternate: np.ndarray | None = None


def _windows(x: np.ndarray, profile: Profile, layout, basis: Basis, first_window: int,
             frame_scope: bool) -> _Windows:
    """Cut ``x`` into windows and give each its budget (and budget block, in frame scope)."""
    n = profile.frame_length
    frames, valid, channel, window = split_frames(x, n)
    mask = np.arange(n) < valid[:, None]
    resolution = np.array([c.resolution for c in profile.channels])[channel]
    peak = np.abs(np.where(mask, frames, 0.0)).max(axis=1)
    e_ref = reference_energy(frames, valid, profile.reference)
    budget = frame_budgets(e_ref, profile.fidelity, resolution, valid, peak, n)
    # Budget blocks: the windows of one channel in one frame (frame scope), else None
    # (every window its own budget).  Gap-mask frames carry one window each.
    block = block_budget = None
    per_frame = layout.windows_per_frame(profile)
    if (profile.fidelity_scope == "frame" and layout.supports_frame_scope and per_frame > 1
            and frame_scope):
        block = budget_blocks(channel, window + first_window, per_frame)
        block_budget = block_budgets(e_ref, profile.fidelity, resolution, valid, peak, n, block)
    mean = None
    if profile.reference == "ac":
        mean = np.where(mask, frames, 0.0).sum(axis=1) / valid
    cx, alternate = basis.analyze(frames), None
    if getattr(layout, "switches_basis", False) and block is not None:
        cx, alternate = _switch_basis(frames, cx, basis, block, block_budget)
    return _Windows(frames, valid, channel, window, mask, e_ref, budget, block, block_budget,
                    mean, cx, basis.analyze(np.ones(n)), _peak_limits(profile, channel),
                    alternate)


#: A budget block moves to the alternate basis when its estimated bits there are below
#: this share of its bits on the profile's basis.  Measured on the real recordings of
#: ``tools/bench_real.py``: at 0.9 the estimate picks the frames that coding both ways
#: picks (within 0.002 bits/sample) and no frame of the eight recordings where the
#: DCT wins everywhere; common practice, no source.
_SWITCH_SHARE = 0.9
#: Blocks whose coefficients' magnitudes sum to this many times more on the alternate
#: basis than on the profile's are not estimated further (the estimate is the
#: encoder's costliest part of the switch; smooth blocks, the most, stop here).  On the
#: real recordings of ``tools/bench_real.py`` the blocks that switch are at most 1.005 (19
#: blocks), and 111 of the 172 blocks stop at the gate.
_SWITCH_GATE = 1.25


def _switch_basis(frames: np.ndarray, cx: np.ndarray, basis: Basis, block: np.ndarray,
                  block_budget: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
    """Layout 6: the budget blocks coded on the alternate basis, and every row's coefficients.

    Each block's bits on either basis are estimated at its budget as
    sum(log2(1 + c**2 / D)) / 2 over its coefficients c, with D the budget per
    coefficient (the rate of a Gaussian component of variance c**2 at
    distortion D; Cover & Thomas, ch. 10), and the block moves where that
    estimate is below ``_SWITCH_SHARE`` of the profile basis's.  Both bases
    have the same constant first vector, so the mean term is the same on both
    and left out.  The estimate runs in float32 (it only ranks two bases) and
    only on blocks that pass ``_SWITCH_GATE``; the rows that switch get their
    coefficients from the alternate basis's own matrix in float64.
    """
    alt = alternate_basis(basis.code, basis.n)
    if alt is None:
        return cx, None
    nb = block_budget.size
    c32 = cx[:, 1:].astype(np.float32)
    a32 = (frames.astype(np.float32) @ alt.matrix.T.astype(np.float32))[:, 1:]
    l1 = [block_sums(np.abs(c).sum(axis=1), block, nb) for c in (c32, a32)]
    cand = np.flatnonzero((l1[1] < _SWITCH_GATE * l1[0])[block])
    if not cand.size:
        return cx, None
    per = block_budget / (np.bincount(block, minlength=nb) * basis.n)
    d = np.maximum(per, np.finfo(np.float32).tiny)[block[cand]][:, None].astype(np.float32)

    def bits(c):
        with np.errstate(over="ignore"):
            c = c[cand]
            return block_sums(0.5 * np.log2(1.0 + c * c / d).sum(axis=1, dtype=np.float64),
                              block[cand], nb)

    # blocks that stopped at the gate sum to 0 on both and stay
    alternate = (bits(a32) < _SWITCH_SHARE * bits(c32))[block]
    if not alternate.any():
        return cx, None
    cx = cx.copy()
    cx[alternate] = alt.analyze(frames[alternate])
    return cx, alternate


def _choose(w: _Windows, layout):
    """Step codes, rounding offsets and codes as the layout chooses them (before the closed loop).

    Returns ``(q, mean_int, code, offset, trellis)``; ``trellis`` is None
    unless the layout may carry levels of dependent quantization.
    """
    cx, mean, dc = w.cx, w.mean, w.dc
    if w.block is not None:  # one step per budget block
        off = layout.block_offset()
        code = choose_block_steps(cx, mean, dc, w.block, w.block_budget, off)
        offset = np.full(code.size, off)
        slack = w.block_budget
    else:
        code, offset = layout.choose_codes(cx, mean, dc, w.budget, w.frames.shape[1])
        slack = w.budget
    q, mean_int, _ = code_frame(cx, mean, dc, code, offset,
                                slack if layout.spends_slack else None, block=w.block)
    trellis = None  # per frame, whether dependent quantization codes it
    if layout.has_trellis:
        if w.block is None:
            q, mean_int, code, trellis = _quantizer_choice(cx, mean, dc, w.budget, q, mean_int,
                                                           code)
        else:
            q, mean_int, code, trellis = _block_quantizer_choice(
                cx, mean, dc, w.block, w.block_budget, q, mean_int, code)
    return q, mean_int, code, offset, trellis


def _step_drop(w: _Windows, rows: np.ndarray, err: np.ndarray, recon: np.ndarray,
               peak_mode: bool) -> np.ndarray:
    """Eighth-octave step codes by which each row's step must shrink (0: it passes).

    ``rows`` holds whole budget blocks (all rows at first, then the rows of
    blocks that failed); every row of a block moves with its block, judged on
    the block's errors summed over all its rows.
    """
    est = over = None
    if peak_mode:
        pk = _valid_max_error(w.frames[rows], recon[rows], w.mask[rows])
        over = pk > w.limit[rows]
        # a uniform quantizer's error scales with its step
        with np.errstate(over="ignore"):
            ratio = np.minimum(pk / w.limit[rows], 2.0**1000)
        est = np.where(over, np.maximum(np.ceil(8.0 * np.log2(np.maximum(ratio, 1.0))).astype(
            np.int64), 1), 0)
    if w.block is None:
        drop = (err[rows] > w.budget[rows] * _MARGIN).astype(np.int64)
        return drop if est is None else np.maximum(drop, est)
    nb = w.block_budget.size
    dropb = (block_sums(err, w.block, nb) > w.block_budget * _MARGIN).astype(np.int64)
    if est is not None:
        np.maximum.at(dropb, w.block[rows], est)
    return dropb[w.block[rows]]


def _closed_loop(w: _Windows, basis: Basis, q, mean_int, code, offset, trellis):
    """Re-quantize rows with finer steps until every budget holds on the decoder's output.

    Updates ``q``, ``mean_int`` and ``code`` in place; returns the
    reconstruction and each row's error energy.
    """
    cx, mean, dc = w.cx, w.mean, w.dc
    recon = reconstruct(q, mean_int, code, basis, trellis, w.alternate)
    err = _valid_error(w.frames, recon, w.mask)
    peak_mode = bool(np.isfinite(w.limit).any())
    finest = np.minimum(_finest_codes(w), code)
    rows = np.arange(code.size)
    drop = _step_drop(w, rows, err, recon, peak_mode)
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
        recon[bad] = reconstruct(qb, mb, code[bad], basis, tb,
                                 None if w.alternate is None else w.alternate[bad])
        err[bad] = _valid_error(w.frames[bad], recon[bad], w.mask[bad])
        rows = bad
        drop = _step_drop(w, rows, err, recon, peak_mode)
        if not (drop > 0).any():
            # Synthesize all frames in one call, as the decoder does: BLAS may round a
            # subset differently from the whole batch, so the check is redone on this.
            recon = reconstruct(q, mean_int, code, basis, trellis, w.alternate)
            err = _valid_error(w.frames, recon, w.mask)
            rows = np.arange(code.size)
            drop = _step_drop(w, rows, err, recon, peak_mode)
    return recon, err


#: Rounds of the predicted closed loop before a block is left unpredicted (each round
#: shrinks the step of every failing block by the estimate of its overshoot).
_PREDICTED_ROUNDS = 12


def _predicted(w: _Windows, basis: Basis, plain_q: np.ndarray, code: np.ndarray,
               offset: np.ndarray, first_window: int, empty: np.ndarray | None):
    """Frame scope with long-term prediction: the budget blocks worth predicting, coded.

    A lag per block comes from :func:`codec.transform.predict.choose_lags`;
    the blocks' windows are then coded in order, each predicted from the
    decoder's samples of the windows before it, starting from the plain
    step; a block whose coefficients do not then cost ``_MIN_SAVING`` less
    than plain stays plain, and blocks that miss their budget on the
    decoder's samples get a finer step and are coded again.  Returns None
    when no block is predicted, else
    ``(rows, q, mean_int, code, lag, offset_in_frame)`` for the rows of the
    predicted blocks (every one meeting its budget) and every row's window
    offset in its frame.  Blocks holding a window of nothing but gaps
    (``empty``) are not predicted, whatever the gap policy, so filled and
    marked streams carry the same data frames.
    """
    nb = w.block_budget.size
    if np.isfinite(w.limit).any():  # peak limits: kept on the plain path
        return None
    seq = w.window + first_window
    start = np.full(nb, np.iinfo(np.int64).max)
    np.minimum.at(start, w.block, seq)
    off = seq - start[w.block]
    lag_b = choose_lags(w.frames, w.mask, w.block, off, nb, w.mean is not None)
    if empty is not None:
        lag_b[w.block[empty]] = 0
    if w.alternate is not None:  # prediction pays on periodic signals, which stay on the DCT
        lag_b[w.block[w.alternate]] = 0
    todo = np.flatnonzero(lag_b[w.block] > 0)
    if not todo.size:
        return None
    pcode, done = code.copy(), np.zeros(code.size, bool)
    q = np.zeros_like(w.cx, dtype=np.int64)
    mean_int = None if w.mean is None else np.zeros(code.size, np.int64)
    lag = np.zeros(code.size, np.int64)
    # never finer than twice the plain path's finest step: a prediction residual may
    # exceed its window a little, and its codes too must stay below 2**52
    finest = _finest_codes(w) + 8
    for rnd in range(_PREDICTED_ROUNDS):  # each round codes again only the blocks that missed
        blocks, sub = np.unique(w.block[todo], return_inverse=True)
        q[todo], mi, lag[todo], err = _code_predicted(
            w, basis, todo, off[todo], lag_b[w.block[todo]], pcode[todo], offset[todo])
        if mean_int is not None:
            mean_int[todo] = mi
        if rnd == 0:  # same steps as the plain coding: go on only where it saves enough
            keep = (block_sums(coefficient_cost_bits(q[todo], mean=mean_int is not None), sub,
                               blocks.size)
                    < (1 - _MIN_SAVING) * block_sums(coefficient_cost_bits(
                        plain_q[todo], mean=mean_int is not None), sub, blocks.size))
            todo, err = todo[keep[sub]], err[keep[sub]]
            blocks, sub = np.unique(w.block[todo], return_inverse=True)
        be, budget = block_sums(err, sub, blocks.size), w.block_budget[blocks]
        over = be > budget * _MARGIN
        done[todo[~over[sub]]] = True
        # an error energy scales with the step squared: 4 eighth-octaves per doubling
        drop = np.ceil(4.0 * np.log2(np.maximum(be / budget, 1.0))).astype(np.int64)
        pcode[todo] -= np.where(over, np.maximum(drop, 1), 0)[sub]
        low = np.bincount(sub, pcode[todo] < finest[todo], minlength=blocks.size) > 0
        todo = todo[(over & ~low)[sub]]  # a block that would need too fine a step stays plain
        if not todo.size:
            break
    rows = np.flatnonzero(done)
    if not rows.size:
        return None
    return (rows, q[rows], None if mean_int is None else mean_int[rows], pcode[rows],
            lag[rows], off)


#: After the first round (at the plain steps) a block goes on only if its coefficients
#: cost at least this share less than the plain coding's: the finer step that the error
#: carried forward may then need takes part of the saving, and most blocks that save less
#: end plain anyway.  (A one-pass estimate, every window predicted from the plain
#: coding's decoded samples at once, misses how a window's error passes on down the
#: frame and let through nine in ten of the blocks that the first round stops on the
#: ``tools/bench_speed.py`` signal.)  Measured with ``tools/bench_real.py`` and
#: ``tools/bench_speed.py``; common practice, no source.
_MIN_SAVING = 0.1


def _code_predicted(w: _Windows, basis: Basis, rows: np.ndarray, off: np.ndarray,
                    lag: np.ndarray, code: np.ndarray, offset: np.ndarray):
    """Code whole blocks window offset by window offset, with prediction where it helps.

    A window the lag can reach is predicted from the decoder's samples of the
    windows before it when that costs less: bits (the range coder's ideal code
    length and the mean field) plus the error energy priced at the high-rate
    slope of a uniform quantizer, 6 / (ln 2 step**2) bits per unit (each
    halving of the step costs a bit per coded term and quarters its error).
    Returns ``(q, mean_int, lag, err)`` for ``rows``; ``lag`` is 0 where a
    window is not predicted.
    """
    n = w.frames.shape[1]
    frames, mask, ac = w.frames[rows], w.mask[rows], w.mean is not None
    q = np.zeros((rows.size, n), np.int64)
    mean_int = np.zeros(rows.size, np.int64) if ac else None
    used = np.zeros(rows.size, np.int64)
    recon = np.zeros((rows.size, n))
    pr, src, col = prediction_index(np.where(predictable(lag, off, n), lag, 0), w.block[rows],
                                    np.zeros(rows.size, np.int64), off, n)
    for k in range(int(off.max(initial=0)) + 1):  # the decoder's order: earlier windows first
        at = np.flatnonzero(off == k)
        qa, ma, ra, cost = _window_codes(w, basis, rows[at], frames[at], code[at], offset[at])
        sel = np.flatnonzero(off[pr] == k)
        if sel.size:
            r = pr[sel]
            i = np.searchsorted(at, r)
            p = recon[src[sel], col[sel]]
            qp, mp, rp, cp = _window_codes(w, basis, rows[r], frames[r] - p, code[r], offset[r])
            keep = cp < cost[i]
            used[r] = np.where(keep, lag[r], 0)
            qa[i[keep]], ra[i[keep]] = qp[keep], rp[keep] + p[keep]  # as the decoder adds it
            if ac:
                ma[i[keep]] = mp[keep]
        q[at], recon[at] = qa, ra
        if ac:
            mean_int[at] = ma
    return q, mean_int, used, _valid_error(frames, recon, mask)


def _splice(packed, trial, sub: np.ndarray, use: np.ndarray):
    """The frames of ``packed`` with those of rows ``use`` taken from ``trial`` (rows ``sub``).

    Frames are independent byte strings, so a frame of either packing can
    stand in the stream; ``trial`` packed the rows ``sub`` (whole frames).
    """
    nfr = int(packed.row_frame.max(initial=-1)) + 1
    p_len = np.bincount(packed.row_frame, packed.row_bits, nfr).astype(np.int64) // 8
    t_len = np.bincount(trial.row_frame, trial.row_bits).astype(np.int64) // 8
    t_of = np.zeros(nfr, np.int64)  # each plain frame's frame in the trial packing
    t_of[packed.row_frame[sub]] = trial.row_frame
    took = np.zeros(nfr, bool)
    took[packed.row_frame[use]] = True
    both = np.frombuffer(packed.data + trial.data, np.uint8)
    start = np.where(took, len(packed.data) + (np.cumsum(t_len) - t_len)[t_of],
                     np.cumsum(p_len) - p_len)
    length = np.where(took, t_len[t_of], p_len)
    idx = np.repeat(start - (np.cumsum(length) - length), length) + np.arange(length.sum())
    row_bits = packed.row_bits.copy()
    row_bits[sub] = np.where(use[sub], trial.row_bits, row_bits[sub])
    head = np.where(took, trial.frame_header_bits[t_of], packed.frame_header_bits)
    return PackedFrames(both[idx].tobytes(), row_bits, int(head.sum()), packed.row_frame, head)


def _window_codes(w: _Windows, basis: Basis, rows: np.ndarray, x: np.ndarray, code: np.ndarray,
                  offset: np.ndarray):
    """Windows ``x`` (of ``rows``) coded at ``code``: codes, mean codes, synthesis and cost.

    The cost, bits plus priced error, makes the per-window choice between
    predicting and not (:func:`_code_predicted`).
    """
    ac = w.mean is not None
    mean = np.where(w.mask[rows], x, 0.0).sum(axis=1) / w.valid[rows] if ac else None
    q, m = _requantize(basis.analyze(x), mean, w.dc, code, offset, None)
    rec = reconstruct(q, m, code, basis)
    price = 6.0 / (np.log(2.0) * step_from_code(code) ** 2)
    cost = (coefficient_cost_bits(q, mean=ac) + _mean_bits(m)
            + price * _valid_error(x, rec, w.mask[rows]))
    return q, m, rec, cost


def _keep_cheaper(layout, key, coded: CodedFrames, packed, alt, w: _Windows, basis: Basis,
                  recon: np.ndarray, err: np.ndarray):
    """Frame by frame, the plain or the predicted coding, whichever packs into fewer bits.

    Returns the packed frames, their codes, the decoder's samples and each
    row's error (``recon`` and ``err`` of the plain coding where it stays);
    every predicted block is checked against its budget on the decoder's
    samples (a miss is our bug: the predicted loop met it on the same samples).
    """
    rows, qp, mp, cp, lp, off = alt
    q, code, lag = coded.q.copy(), coded.step_code.copy(), coded.lag.copy()
    mean = None if coded.mean is None else coded.mean.copy()
    q[rows], code[rows], lag[rows] = qp, cp, lp
    if mean is not None:
        mean[rows] = mp
    # pack only the frames holding predicted blocks, and compare them frame by frame
    nfr = int(packed.row_frame.max(initial=-1)) + 1
    held = np.zeros(nfr, bool)
    held[packed.row_frame[rows]] = True
    sub = np.flatnonzero(held[packed.row_frame])
    t_packed = layout.pack(dataclasses.replace(
        coded, channel=coded.channel[sub], sequence=coded.sequence[sub],
        valid=coded.valid[sub], step_code=code[sub], mean=None if mean is None else mean[sub],
        q=q[sub], lag=lag[sub], trellis=None if coded.trellis is None else coded.trellis[sub],
        alternate=None if coded.alternate is None else coded.alternate[sub]), key)
    t_bits = np.bincount(t_packed.row_frame, t_packed.row_bits)[t_packed.row_frame]
    use = np.zeros(coded.q.shape[0], bool)
    use[sub] = t_bits < np.bincount(packed.row_frame, packed.row_bits, nfr)[
        packed.row_frame[sub]]
    if use.any():
        coded = dataclasses.replace(
            coded, q=np.where(use[:, None], q, coded.q), step_code=np.where(use, code,
                                                                            coded.step_code),
            lag=np.where(use, lag, 0),
            mean=None if mean is None else np.where(use, mean, coded.mean))
        packed = _splice(packed, t_packed, sub, use)
    take = np.zeros(use.size, bool)
    take[rows] = use[rows]  # rows of predicted blocks in frames that keep them
    if not take.any():
        return packed, coded, recon, err
    new = reconstruct(coded.q, coded.mean, coded.step_code, basis, coded.trellis,
                      coded.alternate)
    add_predictions(new, coded.lag, w.block, np.zeros_like(w.block), off)
    recon = np.where(take[:, None], new, recon)
    err = np.where(take, _valid_error(w.frames, new, w.mask), err)
    nb = w.block_budget.size
    if (block_sums(err, w.block, nb) > w.block_budget * _MARGIN)[w.block[take]].any():
        raise RuntimeError("a predicted block misses its budget on the decoder's samples")
    return packed, coded, recon, err


def _finest_codes(w: _Windows) -> np.ndarray:
    """Per window, the finest step code that keeps every integer code below 2**52 (exact in
    float64)."""
    scale = np.abs(w.cx).max(axis=1)
    if w.mean is not None:
        scale = np.maximum(scale, np.abs(w.mean) * np.sqrt(w.frames.shape[1]))
    return code_for_step(np.maximum(scale, 1e-300) * 2.0**-52)


def _peak_limits(profile: Profile, channel: np.ndarray) -> np.ndarray:
    lim = np.array([np.inf if c.max_error is None else c.max_error for c in profile.channels])
    return lim[channel]


def _valid_max_error(frames: np.ndarray, recon: np.ndarray, mask: np.ndarray) -> np.ndarray:
    return np.abs(np.where(mask, frames - recon, 0.0)).max(axis=1)


def _valid_error(frames: np.ndarray, recon: np.ndarray, mask: np.ndarray) -> np.ndarray:
    e = np.where(mask, frames - recon, 0.0)
    return np.einsum("ij,ij->i", e, e)


