"""Energy-fidelity term selection: per-frame budgets and quantizer steps.

For a fidelity target F the error energy of every frame must not exceed
``(1 - F) * E_ref``, where ``E_ref`` is the frame's energy (``total``) or its
energy about the mean (``ac``).  The budget never falls below the energy of the
sensor's own quantization noise, ``N * resolution**2 / 12``.

With a uniform quantizer the kept terms are exactly the coefficients that do
not round to zero, i.e. the largest-energy terms; so choosing the largest step
whose total error (dropped terms plus rounding of kept terms, by Parseval)
fits the budget selects the terms and the step together.  The search is a
bisection on the step code, run on all frames at once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._errors import InputError
from .steps import STEP_CODE_MAX, code_for_step, step_from_code
from .trellis import trellis_quantize, trim_tail

__all__ = [
    "frame_budgets", "reference_energy", "choose_steps", "code_frame", "spend_slack",
    "FLOAT_FLOOR", "budget_blocks", "block_budgets", "choose_block_steps", "spend_block_slack",
    "block_sums", "BlockCheck", "check_blocks", "MAX_MAGNITUDE", "check_magnitude",
]

#: Relative precision below which a frame's error is float noise, not signal:
#: the budget is never below N * (peak * FLOAT_FLOOR)**2.
FLOAT_FLOOR = 2.0**-40

#: Largest sample magnitude the quantizer can code (about 1.86e31 units): the
#: coarsest step, 2**63.875 (code 1023), still meets the float floor of a frame
#: whose peak is this, so its integers stay well inside the layouts' fields.
#: Checked for layouts 1-4, N = 2-4096, both references (constant, alternating
#: and random frames at this peak encode and decode); coding first fails
#: between 2**116 and 2**120 depending on the layout.
MAX_MAGNITUDE = float(step_from_code(STEP_CODE_MAX)) / FLOAT_FLOOR


def check_magnitude(x: np.ndarray, names: list[str], where: str = "input") -> None:
    """Refuse finite samples beyond :data:`MAX_MAGNITUDE`, naming the column (NaN gaps skipped)."""
    peak = np.where(np.isfinite(x), np.abs(x), 0.0).max(axis=0)
    over = np.flatnonzero(peak > MAX_MAGNITUDE)
    if over.size:
        c = int(over[0])
        raise InputError(
            f"column '{names[c]}' holds {peak[c]:.6g} in magnitude, beyond the largest the "
            f"quantizer can code ({MAX_MAGNITUDE:.6g}); rescale it (another unit) before "
            "coding", where)


# Safety factor so that an error sitting exactly on the budget in the
# coefficient domain still meets it after summation in another order.
_MARGIN = 1.0 - 1e-9


def reference_energy(frames: np.ndarray, valid: np.ndarray, reference: str) -> np.ndarray:
    """Energy of each frame's valid samples, about zero or about their mean."""
    # whole frames (all but a short last one, as a rule) need no mask: one pass fewer
    x = frames if reference != "ac" else frames - (frames.sum(axis=1) / valid)[:, None]
    out = np.einsum("ij,ij->i", x, x)
    part = np.flatnonzero(valid < frames.shape[1])
    if part.size:
        f, v = frames[part], valid[part]
        mask = np.arange(frames.shape[1]) < v[:, None]
        x = np.where(mask, f, 0.0)
        if reference == "ac":
            mean = x.sum(axis=1) / v
            x = np.where(mask, f - mean[:, None], 0.0)
        out[part] = np.einsum("ij,ij->i", x, x)
    return out


def frame_budgets(
    e_ref: np.ndarray, fidelity: float, resolution: np.ndarray, valid: np.ndarray,
    peak: np.ndarray, n: int,
) -> np.ndarray:
    """Allowed error energy per frame.

    Parameters
    ----------
    e_ref : ndarray
        Reference energy of each frame.
    fidelity : float
        Target fraction of the reference energy to retain.
    resolution : ndarray
        Sensor resolution of each frame's channel (engineering units).
    valid : ndarray
        Real samples in each frame.
    peak : ndarray
        Largest absolute sample of each frame (sets the float floor).
    n : int
        Frame length.

    Notes
    -----
    Besides the sensor floor, two floors keep every budget reachable: float
    precision (2**-40 of the frame's peak) and the finest quantizer step the
    layout can name, 2**-64 engineering units (rounding error at most half a
    step per coefficient, so N * (2**-65)**2).
    """
    floor_sensor = valid * resolution**2 / 12.0
    floor_float = valid * (peak * FLOAT_FLOOR) ** 2
    floor_layout = n * (0.5 * float(step_from_code(0))) ** 2
    return np.maximum.reduce(
        [(1.0 - fidelity) * e_ref, floor_sensor, floor_float, np.full(e_ref.shape, floor_layout)])


def code_frame(
    cx: np.ndarray, mean: np.ndarray | None, dc: np.ndarray, code: np.ndarray,
    offset: np.ndarray | float = 0.5, budget: np.ndarray | None = None, trellis: bool = False,
    block: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
    """Quantize frames at step ``code`` with rounding ``offset`` (0.5: nearest).

    Returns ``(q, mean_int, err)``: integer coefficient codes, integer mean codes
    (or None) and the error energy by Parseval.  ``dc`` is the basis applied to a
    frame of ones, so the coefficients of ``x - mean_hat`` are ``cx - mean_hat * dc``.
    An offset below 0.5 widens the dead zone around zero (|c| < (1 - offset) step
    codes to 0) and rounds every magnitude down a little: fewer and smaller codes
    at a slightly larger error, which a finer step may then buy back; the
    encoder picks per frame whichever costs fewer bits (rate-distortion choice;
    the decoder is unaffected, it always reconstructs ``q * step``).
    ``trellis``: dependent quantization (layout 4; ``offset`` unused): ``q``
    are trellis levels, reconstructed by
    :func:`codec.quantize.trellis.dequantize_levels`, and a ``budget`` is spent by
    :func:`codec.quantize.trellis.trim_tail`.  With ``block`` (scalar codes only) the
    ``budget`` is one per budget block and is spent over each block's rows
    together (:func:`spend_block_slack`).
    """
    qf, mean_int, err = _quantized(cx, mean, dc, code, offset, trellis)
    q = qf.astype(np.int64)
    if budget is None:
        return q, mean_int, err
    step = step_from_code(code)
    c = cx  # the coefficients about the sent mean
    if mean_int is not None:
        c = cx - (mean_int * (step / np.sqrt(cx.shape[1])))[:, None] * dc
    if trellis:
        q, err = trim_tail(c, q, step, err, budget * _MARGIN)
    elif block is not None:
        q, err = spend_block_slack(c, q, step, err, budget, block)
    else:
        q, err = spend_slack(c, q, step, err, budget)
    return q, mean_int, err


def spend_slack(c: np.ndarray, q: np.ndarray, step: np.ndarray, err: np.ndarray,
                budget: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Zero the +-1 codes that cost least error until the frame's budget is used up.

    The step search moves in eighth-octave steps, so a frame usually ends
    below its budget; the rest buys bits: zeroing a code of +-1 at
    coefficient ``c`` adds ``step * (2 |c| - step)`` of error energy and saves
    its magnitude and sign (a few bits each, nearly the same for every such
    code), so the cheapest ones in error go first (a greedy rate-distortion
    choice; the decoder is unaffected).  Returns the new codes and error.
    """
    cand = np.abs(q) == 1
    if not cand.any():
        return q, err
    st = step[:, None]
    add = np.where(cand, st * (2.0 * np.abs(c) - st), np.inf)
    srt = np.sort(add, axis=1)
    with np.errstate(invalid="ignore"):
        cs = np.cumsum(srt, axis=1)
    slack = budget * _MARGIN - err
    k = (cs <= slack[:, None]).sum(axis=1)
    km = np.maximum(k - 1, 0)[:, None]
    thr = np.where(k > 0, np.take_along_axis(srt, km, 1)[:, 0], -np.inf)
    # ties at the threshold could overshoot; the encoder's closed loop re-checks every frame
    zero = add <= thr[:, None]
    extra = np.where(k > 0, np.take_along_axis(cs, km, 1)[:, 0], 0.0)
    return np.where(zero, 0, q), err + extra


def _quantized(cx, mean, dc, code, offset, trellis=False, error_only=False):
    """(q as floats, mean_int, error energy); few full-size temporaries (memory bound).

    ``trellis``: dependent quantization's levels; with ``error_only`` q is None.
    """
    step = step_from_code(code)
    c = cx
    mean_int = None
    if mean is not None:
        mstep = step / np.sqrt(cx.shape[1])
        mean_int = np.rint(mean / mstep).astype(np.int64)
        c = cx - (mean_int * mstep)[:, None] * dc
    if trellis and error_only:
        return None, mean_int, trellis_quantize(c, step, error_only=True)
    if trellis:
        q, err = trellis_quantize(c, step)
        return q, mean_int, err
    st = step[:, None]
    if error_only and not (np.isscalar(offset) and offset == 0.5):
        # the error alone: |c| - floor(|c| / step + o) step is exactly -(c - q step) where
        # c < 0 (IEEE rounding is symmetric), so the squares and their sums are the same
        # without putting the signs back
        a = np.abs(c)
        off = np.broadcast_to(np.asarray(offset, dtype=np.float64), step.shape)[:, None]
        q = np.divide(a, st)
        np.add(q, off, out=q)
        np.floor(q, out=q)
        np.multiply(q, st, out=q)
        np.subtract(a, q, out=a)
        return None, mean_int, np.einsum("ij,ij->i", a, a)
    if np.isscalar(offset) and offset == 0.5:
        q = np.divide(c, st)
        np.rint(q, out=q)
    else:
        off = np.broadcast_to(np.asarray(offset, dtype=np.float64), step.shape)[:, None]
        q = np.abs(c)
        np.divide(q, st, out=q)
        np.add(q, off, out=q)
        np.floor(q, out=q)
        np.copysign(q, c, out=q)
    r = np.multiply(q, st)
    np.subtract(c, r, out=r)
    return q, mean_int, np.einsum("ij,ij->i", r, r)


#: Frames per block in the step search: a block's temporaries stay in the CPU cache,
#: which makes the search about twice as fast as whole-array passes (measured).
_BLOCK_ROWS = 2048


def _error_only(cx, mean, dc, code, offset, trellis=False):
    """Error energy per frame at step ``code`` (the search's inner loop), block by block."""
    nf = cx.shape[0]
    if trellis:  # the Viterbi path cost; blocks of its own
        return _quantized(cx, mean, dc, code, offset, trellis, error_only=True)[2]
    out = np.empty(nf)
    off = np.broadcast_to(np.asarray(offset, dtype=np.float64), (nf,))
    for a in range(0, nf, _BLOCK_ROWS):
        b = min(a + _BLOCK_ROWS, nf)
        out[a:b] = _quantized(cx[a:b], None if mean is None else mean[a:b], dc, code[a:b],
                              offset if np.isscalar(offset) else off[a:b], error_only=True)[2]
    return out


def choose_steps(
    cx: np.ndarray, mean: np.ndarray | None, dc: np.ndarray, budget: np.ndarray,
    offset: float = 0.5, hint: np.ndarray | None = None, trellis: bool = False,
) -> np.ndarray:
    """Largest step code per frame whose error fits ``budget`` (bisection).

    The smallest code considered keeps every integer below 2**52, so codes fit
    the frame layout and the float arithmetic stays exact enough; the float
    floor in the budget makes that code always feasible.  ``trellis``: the
    error is that of dependent quantization (every term errs by at most one
    step, as with ``offset`` 0); a ``hint`` there is the scalar quantizer's
    code (see :func:`_trellis_steps`).
    """
    if trellis:
        offset = 0.0
    nf, n = cx.shape
    scale = np.abs(cx).max(axis=1)
    if mean is not None:
        scale = np.maximum(scale, np.abs(mean) * np.sqrt(n))
    floor = code_for_step(np.maximum(scale, 1e-300) * 2.0**-52)
    # Bracket: with rounding offset o every term errs by at most (1 - o) * step,
    # so a step of sqrt(budget / n) / (1 - o) always fits (one code below, for
    # rounding); a step above 2 * scale rounds every term to zero, so nothing
    # coarser changes the error.  A ``hint`` (the code found for another offset)
    # narrows the bracket to an octave around it; it is checked, not trusted.
    safe = np.maximum(floor, code_for_step(np.sqrt(budget / n) / (1.0 - offset)) - 1)
    # the mean is sent on its own, so only the terms about it bound the useful step
    ac = scale if mean is None else np.abs(cx - mean[:, None] * dc).max(axis=1)
    hi = np.clip(code_for_step(2.0 * np.maximum(ac, 1e-300)) + 1, safe + 1, STEP_CODE_MAX)
    limit = budget * _MARGIN
    if trellis and hint is not None:
        return _trellis_steps(cx, mean, dc, limit, hint, safe, hi)

    def err(code, rows):
        if trellis:  # only the frames asked for: a Viterbi pass is dear
            return _error_only(cx[rows], None if mean is None else mean[rows], dc, code,
                               offset, True)
        # every frame (the others at a code that fits, their results dropped): block
        # passes over whole arrays, as before, rather than gathering a subset
        full = safe.copy()
        full[rows] = code
        return _error_only(cx, mean, dc, full, offset)[rows]

    every = np.arange(nf)
    if hint is None:
        # lo holds by the bound (the caller's closed loop catches float rounding)
        lo = np.minimum(safe, hi - 1)
        lo = np.where(err(hi, every) <= limit, hi, lo)
    else:
        # a wider dead zone errs more at the same step: search below the hint
        hi = np.clip(hint + 1, safe + 1, hi)
        lo = np.clip(hint - 6, safe, hi - 1)
        lo = np.where(err(lo, every) <= limit, lo, safe)
    return _bisect(err, lo, hi, limit)


def _bisect(err, lo: np.ndarray, hi: np.ndarray, limit: np.ndarray) -> np.ndarray:
    """Per frame, the largest code in [lo, hi) whose error fits ``limit``.

    ``lo`` fits, ``hi`` is taken not to; ``err(codes, rows)`` is the error of
    frames ``rows`` at ``codes``.  Each round halves every open bracket.
    """
    lo, hi = lo.copy(), hi.copy()
    while True:
        rows = np.flatnonzero(hi - lo > 1)
        if not rows.size:
            return lo
        mid = (lo[rows] + hi[rows]) // 2
        ok = err(mid, rows) <= limit[rows]
        lo[rows[ok]] = mid[ok]
        hi[rows[~ok]] = mid[~ok]


def _trellis_steps(cx, mean, dc, limit, hint, safe, top):
    """Step codes for dependent quantization, from the scalar quantizer's codes ``hint``.

    Dependent quantization at step d errs about as a scalar quantizer at 1.5
    to 2 d, so its code lies a few below the scalar one (measured: 0 to 11
    below, mostly 4 to 6).  One Viterbi pass at ``hint - 5`` and the
    high-rate rule (error energy ~ step**2: four codes per doubling) predict
    each frame's code; one pass checks the prediction and a bisection, on the
    frames still open only, settles the rest.  ``safe`` always fits (every
    term errs by at most one step); ``top`` is the coarsest code worth trying.
    """
    def err(code, rows=None):
        if rows is None:  # every frame: no copy
            return _error_only(cx, mean, dc, code, 0.0, True)
        return _error_only(cx[rows], None if mean is None else mean[rows], dc, code, 0.0,
                           True)

    hi = np.clip(hint + 1, safe + 1, top)  # treated as too coarse
    low = np.clip(hint - 12, safe, hi - 1)
    probe = np.clip(hint - 5, low, hi - 1)
    e = err(probe)
    with np.errstate(over="ignore", divide="ignore"):  # e may be 0: the guess clips to hi - 1
        guess = probe + np.floor(4.0 * np.log2(limit / np.maximum(e, 1e-300)))
    guess = np.clip(guess, low, hi - 1).astype(np.int64)
    fits = err(guess) <= limit
    lo = np.where(fits, guess, low)
    hi = np.where(fits, hi, guess)
    # frames whose guess failed: is the bottom of the bracket feasible, or fall back
    failed = np.flatnonzero(~fits)
    below = failed[lo[failed] < guess[failed]]
    ok = np.zeros(cx.shape[0], dtype=bool)
    if below.size:
        ok[below] = err(lo[below], below) <= limit[below]
    lo[failed] = np.where(ok[failed], lo[failed], safe[failed])
    return _bisect(err, lo, hi, limit)


# --- Budgets shared by several windows (fidelity_scope = "frame") -----------------------
#
# The windows of one channel that travel in one frame form a *budget block*: their
# error energies add up to at most max((1 - F) * sum E_ref, sum N * res**2 / 12), and
# one quantizer step serves them all.  At high rate a uniform quantizer with step d
# errs d**2 / 12 per coded coefficient, whatever the coefficient's variance, so one
# step across the block spreads the error evenly over the coefficients that are
# coded and leaves the ones below d**2 / 12 at zero: the reverse water-filling
# allocation of Cover & Thomas (2006), Theorem 10.3.3, with d**2 / 12 as the water
# level.  Window scope is the special case of blocks of one window.


def budget_blocks(channel: np.ndarray, window: np.ndarray, windows_per_frame: int) -> np.ndarray:
    """Block number of each row (one window of one channel): its channel and its frame.

    ``window`` is the stream's window number (the frame packer groups windows
    ``window // windows_per_frame`` into one frame); blocks are numbered 0, 1, ...
    in order of first appearance of (frame, channel).
    """
    key = (window // windows_per_frame) * (int(channel.max(initial=0)) + 1) + channel
    _, first, inv = np.unique(key, return_index=True, return_inverse=True)
    rank = np.empty(first.size, np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(first.size)
    return rank[inv.ravel()]


def block_sums(values: np.ndarray, block: np.ndarray, blocks: int) -> np.ndarray:
    """Sum of ``values`` (one per row) over each block."""
    return np.bincount(block, weights=values, minlength=blocks)


def block_budgets(
    e_ref: np.ndarray, fidelity: float, resolution: np.ndarray, valid: np.ndarray,
    peak: np.ndarray, n: int, block: np.ndarray,
) -> np.ndarray:
    """Allowed error energy per block: every term of :func:`frame_budgets` summed over the block.

    ``max((1 - F) * sum E_ref, sum N * res**2 / 12, float floor, layout floor)``:
    each floor is the sum of the floors of the block's windows, so a block of one
    window has exactly the budget :func:`frame_budgets` gives that window.
    """
    nb = int(block.max(initial=-1)) + 1

    def s(v):
        return block_sums(v, block, nb)

    floor_layout = np.full(e_ref.shape, n * (0.5 * float(step_from_code(0))) ** 2)
    return np.maximum.reduce([
        (1.0 - fidelity) * s(e_ref), s(valid * resolution**2 / 12.0),
        s(valid * (peak * FLOAT_FLOOR) ** 2), s(floor_layout)])


def _row_scale(cx, mean, dc, n):
    if mean is not None and n > 1 and np.abs(dc[1:]).max() <= 1e-12 * abs(dc[0]):
        # a basis whose first vector is constant (dct, haar, legendre, walsh): removing the
        # mean changes coefficient 0 alone (the others' share of a constant is rounding,
        # 1e-16 of it, which only these search bounds would see), so one pass serves both
        rest = _row_absmax(cx[:, 1:])
        scale = np.maximum(np.maximum(rest, np.abs(cx[:, 0])), np.abs(mean) * np.sqrt(n))
        return scale, np.maximum(rest, np.abs(cx[:, 0] - mean * dc[0]))
    scale = _row_absmax(cx)
    if mean is not None:
        scale = np.maximum(scale, np.abs(mean) * np.sqrt(n))
    ac = scale if mean is None else _row_absmax(cx - mean[:, None] * dc)
    return scale, ac


def _row_absmax(x: np.ndarray) -> np.ndarray:
    """``np.abs(x).max(axis=1)``, by halving the rows: a maximum is exact in any order,
    and whole-column passes beat a reduction along short rows (twice as fast, measured)."""
    y = np.abs(x)
    while y.shape[1] > 1:
        h = y.shape[1] // 2
        top = np.maximum(y[:, :h], y[:, h : 2 * h])
        if y.shape[1] % 2:
            top[:, 0] = np.maximum(top[:, 0], y[:, -1])
        y = top
    return y[:, 0]


def choose_block_steps(
    cx: np.ndarray, mean: np.ndarray | None, dc: np.ndarray, block: np.ndarray,
    budget: np.ndarray, offset: float = 0.5, trellis: bool = False,
) -> np.ndarray:
    """Largest step code per block whose summed error fits the block's ``budget``.

    As :func:`choose_steps`, with the error of a block the sum of its rows'
    errors at the block's one step.  Returns the code of every row (its block's).
    ``trellis``: the error of dependent quantization (every term errs by at
    most one step, as with ``offset`` 0).
    """
    if trellis:
        offset = 0.0
    nf, n = cx.shape
    nb = budget.size
    scale, ac = _row_scale(cx, mean, dc, n)
    low = np.iinfo(np.int64).min
    floor = np.full(nb, low)
    np.maximum.at(floor, block, code_for_step(np.maximum(scale, 1e-300) * 2.0**-52))
    rows = np.bincount(block, minlength=nb)
    # every row errs by at most N ((1 - o) step)**2, so k rows by k times that
    safe = np.maximum(floor, code_for_step(np.sqrt(budget / (rows * n)) / (1.0 - offset)) - 1)
    hi = np.full(nb, low)
    np.maximum.at(hi, block, code_for_step(2.0 * np.maximum(ac, 1e-300)) + 1)
    hi = np.clip(hi, safe + 1, STEP_CODE_MAX)
    limit = budget * _MARGIN

    def err(code, blocks):
        full = safe.copy()
        full[blocks] = code
        return block_sums(_error_only(cx, mean, dc, full[block], offset, trellis), block,
                          nb)[blocks]

    lo = np.minimum(safe, hi - 1)
    lo = np.where(err(hi, np.arange(nb)) <= limit, hi, lo)
    return _bisect(err, lo, hi, limit)[block]


def spend_block_slack(c: np.ndarray, q: np.ndarray, step: np.ndarray, err: np.ndarray,
                      budget: np.ndarray, block: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`spend_slack` over blocks: the cheapest +-1 codes of the whole block go first.

    ``err`` is per row, ``budget`` per block; returns the new codes and the
    error of every row.
    """
    cand = np.abs(q) == 1
    if not cand.any():
        return q, err
    nf, n = q.shape
    nb = budget.size
    # the candidates only, block by block (rows of a block in order): each block's costs
    # side by side in one row padded with inf, as wide as the block with the most
    order = np.argsort(block, kind="stable")
    r, j = np.nonzero(cand[order])
    rows = order[r]
    sr = step[rows]
    add = sr * (2.0 * np.abs(c[rows, j]) - sr)
    blk = block[rows]
    counts = np.bincount(blk, minlength=nb)
    pos = np.arange(add.size) - np.repeat(np.cumsum(counts) - counts, counts)
    wide = np.full((nb, int(counts.max())), np.inf)
    wide[blk, pos] = add
    srt = np.sort(wide, axis=1)
    with np.errstate(invalid="ignore"):
        cs = np.cumsum(srt, axis=1)
    slack = budget * _MARGIN - block_sums(err, block, nb)
    k = (cs <= slack[:, None]).sum(axis=1)
    km = np.maximum(k - 1, 0)[:, None]
    thr = np.where(k > 0, np.take_along_axis(srt, km, 1)[:, 0], -np.inf)
    # ties at the threshold could overshoot; the encoder's closed loop re-checks every block
    z = add <= thr[blk]
    spent = np.zeros((nf, n))  # row sums over the full rows, as the error is summed elsewhere
    spent[rows[z], j[z]] = add[z]
    q = q.copy()
    q[rows[z], j[z]] = 0
    return q, err + spent.sum(axis=1)


@dataclass(frozen=True)
class BlockCheck:
    """Budget blocks measured on decoded samples.

    Per block: ``error`` (energy over the block's real samples), ``budget``,
    ``reference`` (summed reference energy), ``fidelity`` (1 - error / reference,
    1 for a silent block) and ``met``.
    """

    error: np.ndarray
    budget: np.ndarray
    reference: np.ndarray
    fidelity: np.ndarray
    met: np.ndarray


def check_blocks(row_error: np.ndarray, block: np.ndarray, budget: np.ndarray,
                 reference: np.ndarray) -> BlockCheck:
    """Sum measured row errors per block and compare them with the blocks' budgets."""
    err = block_sums(row_error, block, budget.size)
    fid = np.where(reference > 0, 1.0 - err / np.where(reference > 0, reference, 1.0), 1.0)
    return BlockCheck(err, budget, reference, fid, err <= budget)
