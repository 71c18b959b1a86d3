"""Long-term prediction inside a frame: a window predicted from its own channel's decoded past.

A quasi-periodic signal (the daily cycle of hourly readings, a pulse wave,
the yearly cycle of monthly values) repeats itself, so a window can be
predicted from the decoded samples one period (``lag``) back and only the
difference coded: long-term ("pitch") prediction, as in speech coding (B. S.
Atal and M. R. Schroeder, "Adaptive predictive coding of speech signals",
Bell Syst. Tech. J. 49, 1970).  A lag shorter than the window repeats the
last ``lag`` decoded samples (periodic extension).  A prediction never
reaches before the first window of its frame, so frames stay independent:
the window at offset ``k`` of a frame may be predicted only when
``lag <= k * N``.

Both ends add the prediction with :func:`add_predictions`, window by window,
to the same synthesized rows, so the encoder's closed-loop check sees the
decoder's samples bit for bit.  :func:`choose_lags` is the encoder's search.
"""

from __future__ import annotations

import numpy as np
import scipy.fft

__all__ = ["lag_bits", "predictable", "prediction_sources", "prediction_index", "add_predictions",
           "window_energy", "choose_lags"]

#: Shortest lag searched: two samples repeat as a near-constant, which the mean already codes.
MIN_LAG = 3
#: Longest lag searched, in windows: the windows a lag of more than two windows leaves
#: unpredicted, and the quantization error passed on down chains of predictions, cost
#: more than the lag saves (measured with ``tools/bench_real.py`` and
#: ``tools/bench_speed.py``: no real recording gained from a longer lag).  The wire
#: format carries any lag up to 15 N.
MAX_LAG_WINDOWS = 2
#: A budget block is predicted only when the open-loop prediction leaves at most this share
#: of its windows' energy (about 1.5 dB): below that, the lag field and flags and the
#: quantization error that prediction carries forward cost more than they save (measured
#: with ``tools/bench_real.py``; common practice, no source).
MAX_RESIDUAL_SHARE = 0.7
#: Peaks of the autocorrelation tried per block (each costs one pass over the block).
CANDIDATES = 4
#: Peaks whose normalized autocorrelation is below this are not tried: a stationary
#: signal predicted one lag back leaves about 2 (1 - rho) of its energy, so a peak well
#: below 0.65 cannot leave MAX_RESIDUAL_SHARE (the screen is loose on purpose).
MIN_CORRELATION = 0.5


def lag_bits(n: int) -> int:
    """Bits of a lag field: lags 1 .. 15 N (a frame holds at most 16 windows); 0 = none.

    Examples
    --------
    >>> lag_bits(64), lag_bits(8)
    (10, 7)
    """
    return int(15 * n).bit_length()


def predictable(lag: np.ndarray, offset: np.ndarray, n: int) -> np.ndarray:
    """Whether a window at ``offset`` in its frame can be predicted with ``lag`` (> 0).

    Examples
    --------
    >>> predictable(np.array([24, 24, 100, 0]), np.array([0, 1, 1, 3]), 64).tolist()
    [False, True, False, False]
    """
    return (lag > 0) & (lag <= offset * n)


def prediction_sources(offset: np.ndarray, lag: np.ndarray, n: int
                       ) -> tuple[np.ndarray, np.ndarray]:
    """For each sample of predictable windows: how many windows back, and which column.

    Sample ``i`` of the window at ``offset`` k is predicted by the frame's
    decoded sample ``k N - lag + (i mod lag)``.

    Returns
    -------
    back, column : ndarray of int, shape (rows, n)

    Examples
    --------
    >>> back, col = prediction_sources(np.array([1]), np.array([3]), 4)
    >>> back.tolist(), col.tolist()
    ([[1, 1, 1, 1]], [[1, 2, 3, 1]])
    """
    i = np.arange(n)
    pos = offset[:, None] * n - lag[:, None] + i[None, :] % lag[:, None]
    return offset[:, None] - pos // n, pos % n


def prediction_index(lag: np.ndarray, frame: np.ndarray, channel: np.ndarray,
                     offset: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Where each predicted row's prediction comes from: ``(rows, source rows, columns)``.

    ``rows`` are the rows with ``lag > 0``; row ``rows[i]``'s prediction is
    ``values[src[i], col[i]]`` once the rows before it in its frame are final.
    Every window of a channel in a frame must be present (offsets 0, 1, ...).

    Examples
    --------
    >>> import numpy as np
    >>> pr, src, col = prediction_index(np.array([0, 2]), np.zeros(2, int), np.zeros(2, int),
    ...                                 np.array([0, 1]), 4)
    >>> pr.tolist(), src.tolist(), col.tolist()
    ([1], [[0, 0, 0, 0]], [[2, 3, 2, 3]])
    """
    pr = np.flatnonzero(lag > 0)
    order = np.lexsort((offset, channel, frame))  # a frame's windows in order, channel by channel
    place = np.empty_like(order)
    place[order] = np.arange(order.size)
    back, col = prediction_sources(offset[pr], lag[pr], n)
    return pr, order[place[pr][:, None] - back], col


def add_predictions(rows: np.ndarray, lag: np.ndarray, frame: np.ndarray, channel: np.ndarray,
                    offset: np.ndarray) -> np.ndarray:
    """Add to each row with ``lag > 0`` its prediction, window offset by window offset, in place.

    ``rows`` are synthesized windows (one per row; every window of a channel
    in a frame present, offsets 0, 1, ...); ``lag`` is 0 for a row that is
    not predicted and must satisfy :func:`predictable` otherwise.  Windows
    at offset k use the final values of offsets below k, so the rows come
    out as the decoder shows them.

    Examples
    --------
    A window of a period-3 wave predicted from the window before it, with
    nothing added:

    >>> import numpy as np
    >>> rows = np.array([[0., 1, 2, 0, 1, 2], [0, 0, 0, 0, 0, 0]])
    >>> add_predictions(rows, np.array([0, 3]), np.zeros(2, int), np.zeros(2, int),
    ...                 np.array([0, 1]))[1].tolist()
    [0.0, 1.0, 2.0, 0.0, 1.0, 2.0]
    """
    if not (lag > 0).any():
        return rows
    pr, src, col = prediction_index(lag, frame, channel, offset, rows.shape[1])
    for k in np.unique(offset[pr]).tolist():  # at most 15 steps, each over every frame at once
        sel = offset[pr] == k
        rows[pr[sel]] += rows[src[sel], col[sel]]
    return rows


def window_energy(x: np.ndarray, mask: np.ndarray, remove_mean: bool) -> np.ndarray:
    """Energy of each row's samples under ``mask``, about their mean with ``remove_mean``.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.array([[1.0, 3.0, 9.0]])
    >>> window_energy(x, np.array([[True, True, False]]), True).tolist()
    [2.0]
    """
    xm = np.where(mask, x, 0.0)
    e = (xm * xm).sum(axis=1)
    if remove_mean:
        e = e - xm.sum(axis=1) ** 2 / np.maximum(mask.sum(axis=1), 1)
    return np.maximum(e, 0.0)


def choose_lags(frames: np.ndarray, mask: np.ndarray, block: np.ndarray, offset: np.ndarray,
                blocks: int, remove_mean: bool) -> np.ndarray:
    """The lag of each budget block (0: not worth predicting), from the input samples.

    The block's windows (rows of ``frames``, ``offset`` 0, 1, ... in each
    block) are joined, the strongest peaks of their autocorrelation (by FFT)
    are tried as lags with the input itself as the prediction, and the lag
    leaving the least energy wins if it leaves at most
    :data:`MAX_RESIDUAL_SHARE` of the block's energy; windows whose
    prediction would leave more than their own energy count their own.

    Examples
    --------
    A wave of period 24 in windows of 64, one block of eight windows:

    >>> import numpy as np
    >>> x = np.sin(2 * np.pi * np.arange(512) / 24).reshape(8, 64)
    >>> choose_lags(x, np.ones_like(x, bool), np.zeros(8, int), np.arange(8), 1, True)
    array([24])
    """
    n = frames.shape[1]
    width = int(offset.max(initial=0)) + 1
    if width < 2:
        return np.zeros(blocks, np.int64)
    longest = min(width - 1, MAX_LAG_WINDOWS) * n
    # zero padding past the longest lag keeps the correlation linear; an even length
    # makes the power spectrum's inverse a DCT-I (real to real) of half the length + 1.
    # The autocorrelation only ranks candidate lags (each is then measured in float64),
    # so float32 serves and halves the memory the FFT touches.
    size = 2 * scipy.fft.next_fast_len((width * n + longest + 1) // 2, real=True)
    sig = np.zeros((blocks, size), np.float32)
    cols = offset[:, None] * n + np.arange(n)
    sig[block[:, None], cols] = frames
    short = np.flatnonzero(~mask.all(axis=1))  # the samples past a short last window
    sig[block[short, None], cols[short]] *= mask[short]
    sig[:, : width * n] -= sig[:, : width * n].mean(axis=1, keepdims=True)
    spec = scipy.fft.rfft(sig, axis=1)
    acf = scipy.fft.dct(spec.real**2 + spec.imag**2, type=1, axis=1)[:, : longest + 1]
    # normalized, biased: a long lag sums fewer products, so shorter lags (which more of
    # the block's windows can use) rank first among equally periodic ones
    rho = acf / np.maximum(acf[:, :1], np.finfo(np.float32).tiny)
    inner = rho[:, 1:-1]
    peak = (inner >= rho[:, :-2]) & (inner >= rho[:, 2:]) & (inner >= MIN_CORRELATION)
    peak[:, : MIN_LAG - 1] = False
    score = np.where(peak, inner, -np.inf)
    k = min(CANDIDATES, score.shape[1])
    top = np.argpartition(-score, k - 1, axis=1)[:, :k]
    top = np.take_along_axis(top, np.argsort(-np.take_along_axis(score, top, axis=1), axis=1,
                                             kind="stable"), axis=1)
    best = np.zeros(blocks, np.int64)
    tried = np.isfinite(score).any(axis=1)
    if not tried.any():
        return best
    rows = np.flatnonzero(tried[block])  # only blocks with a peak worth trying
    frames, mask, block, offset = frames[rows], mask[rows], block[rows], offset[rows]
    at = np.zeros((blocks, width), np.int64)  # row of each (block, window offset)
    at[block, offset] = np.arange(rows.size)
    own = window_energy(frames, mask, remove_mean)
    best_e = np.bincount(block, own, minlength=blocks) * MAX_RESIDUAL_SHARE
    for c in range(top.shape[1]):
        ok = np.isfinite(np.take_along_axis(score, top[:, c:c + 1], axis=1)[:, 0])
        lag = np.where(ok, top[:, c] + 1, 0)[block]
        r = np.flatnonzero(predictable(lag, offset, n))
        res = own.copy()
        if r.size:
            back, col = prediction_sources(offset[r], lag[r], n)
            src = at[block[r][:, None], offset[r][:, None] - back]
            res[r] = np.minimum(window_energy(frames[r] - frames[src, col], mask[r],
                                              remove_mean), own[r])
        e = np.bincount(block, res, minlength=blocks)
        better = ok & (e < best_e)
        best = np.where(better, top[:, c] + 1, best)
        best_e = np.where(better, e, best_e)
    return best
