"""Figures of merit for a coded stream: bits, fidelity, SNR, PRD, peak error.

Definitions (written out in the README):

* SNR  = 10 log10( sum x^2 / sum (x - x_hat)^2 )  dB
* PRD  = 100 sqrt( sum (x - x_hat)^2 / sum x^2 )  %
* mean-removed variants use x - mean(x) in the numerator / denominator
  (``snr_ac_db`` and ``prdn_percent``), which is what matters for a channel
  that sits on a large offset.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["error_figures", "stream_report", "scope_figures", "units_of", "with_unit",
           "channel_table", "pooled_label", "common_unit"]


def _db(num: float, den: float) -> float | None:
    if den == 0.0:
        return None  # exact reconstruction: SNR is unbounded (JSON null)
    if num == 0.0:
        return -math.inf if den else None
    return 10.0 * math.log10(num / den)


def error_figures(x: np.ndarray, x_hat: np.ndarray) -> dict:
    """SNR, PRD and peak error of ``x_hat`` against ``x`` (same shape, finite).

    Parameters
    ----------
    x, x_hat : ndarray
        Input and decoded samples.

    Returns
    -------
    dict
        ``snr_db`` (10 log10 of signal over error energy), ``snr_ac_db`` (the
        signal about its mean), ``prd_percent`` (100 sqrt(error / signal
        energy)), ``prdn_percent`` (PRD about the mean), ``max_abs_error`` and
        ``error_energy``.

    Examples
    --------
    Signal energy 9 + 16 = 25, error energy 1: SNR = 10 log10(25) = 13.98 dB
    and PRD = 100 sqrt(1 / 25) = 20 % (the definitions of the signal-compression
    literature, e.g. the PRD of ECG coding):

    >>> import numpy as np
    >>> f = error_figures(np.array([3.0, 4.0]), np.array([3.0, 3.0]))
    >>> round(f["snr_db"], 2), f["prd_percent"], f["max_abs_error"]
    (13.98, 20.0, 1.0)
    """
    e = x - x_hat
    err = float(np.einsum("i,i->", e.ravel(), e.ravel()))
    sig = float(np.einsum("i,i->", x.ravel(), x.ravel()))
    xc = x - x.mean(axis=0) if x.size else x
    sig_ac = float(np.einsum("i,i->", xc.ravel(), xc.ravel()))
    return {
        "snr_db": _db(sig, err),
        "snr_ac_db": _db(sig_ac, err),
        "prd_percent": 100.0 * math.sqrt(err / sig) if sig else (0.0 if err == 0 else None),
        "prdn_percent": 100.0 * math.sqrt(err / sig_ac) if sig_ac else (0.0 if err == 0 else None),
        "max_abs_error": float(np.abs(e).max()) if e.size else 0.0,
        "error_energy": err,
    }


def stream_report(
    x: np.ndarray,
    x_hat: np.ndarray,
    profile,
    frame_bits: np.ndarray,
    frame_channel: np.ndarray,
    frame_fidelity: np.ndarray,
    frame_met: np.ndarray,
    frame_floor: np.ndarray | None = None,
    extra_bits: int = 0,
    header_bits: int | None = None,
) -> dict:
    """The JSON report of ``encode`` and ``roundtrip``.

    Parameters
    ----------
    x, x_hat : ndarray
        Input and reconstruction, samples x channels.
    profile : Profile
        The bound profile (one ChannelSpec per column).
    frame_bits, frame_channel : ndarray
        Bits and channel of every frame.
    frame_fidelity, frame_met : ndarray
        Achieved fidelity of every frame and whether it met its budget.
    frame_floor : ndarray of bool, optional
        Frames held to a floor (sensor resolution) rather than to the fidelity
        target, because their signal lies within the sensor's resolution.  They
        are counted in ``frames_at_floor`` and left out of ``fidelity_min``.
    extra_bits : int
        Stream bits that belong to no frame (counted in ``bits_total``).
    header_bits : int, optional
        Bits of the stream that carry no coefficient (sync markers, headers,
        side information, padding, CRCs); reported per input sample as
        ``header_bits_per_sample``.
    """
    samples, channels = x.shape
    raw = np.array([c.raw_bits_per_sample for c in profile.channels], dtype=np.float64)
    bits_total = int(frame_bits.sum()) + int(extra_bits)
    if frame_floor is None:
        frame_floor = np.zeros(frame_bits.size, dtype=bool)

    def figures(xs, xh, bits, raw_bits, fid, met, floor, nframes):
        count = xs.size
        judged = fid[~floor]
        out = {
            "frames": int(nframes),
            "samples": int(xs.shape[0]),
            "bits_total": int(bits),
            "bits_per_sample": bits / count if count else 0.0,
            "bits_per_frame_mean": bits / nframes if nframes else 0.0,
            "raw_bits_per_sample": float(raw_bits),
            "compression_ratio": (raw_bits * count / bits) if bits else None,
            "fidelity_target": profile.fidelity,
            "fidelity_min": float(judged.min()) if judged.size else None,
            "fidelity_mean": float(judged.mean()) if judged.size else None,
            "frames_below_target": int((~met).sum()),
            "frames_at_floor": int(floor.sum()),
        }
        out.update(error_figures(xs, xh))
        return out

    report = figures(x, x_hat, bits_total, raw.mean(), frame_fidelity, frame_met, frame_floor,
                     frame_bits.size)
    report["channels"] = channels
    if header_bits is not None:
        report["header_bits_per_sample"] = (header_bits + int(extra_bits)) / x.size
    report["reference"] = profile.reference
    report["basis"] = profile.basis
    report["frame_length"] = profile.frame_length
    per = {}
    for c, spec in enumerate(profile.channels):
        sel = frame_channel == c
        per[spec.name] = figures(
            x[:, c : c + 1], x_hat[:, c : c + 1], int(frame_bits[sel].sum()),
            raw[c], frame_fidelity[sel], frame_met[sel], frame_floor[sel], int(sel.sum()),
        )
    report["per_channel"] = per
    report["units"] = units_of(profile)
    return report


def scope_figures(profile, block: np.ndarray, block_met: np.ndarray, block_floor: np.ndarray,
                  window_fidelity: np.ndarray, window_floor: np.ndarray) -> dict:
    """Report keys that say which budget scope holds and how the blocks fared.

    ``fidelity_scope`` is the profile's; ``budget_blocks`` counts the budgets
    the stream was held to (one per window of each channel in window scope;
    one per channel per frame in frame scope), ``blocks_below_target`` those
    missed.  ``fidelity_min``/``fidelity_mean`` of the report are over budget
    blocks; ``window_fidelity_min`` is the lowest single-window fidelity, which
    in frame scope may lie below the target (a quiet window next to a loud one).
    """
    judged = window_fidelity[~window_floor]
    return {
        "fidelity_scope": profile.fidelity_scope,
        "budget_blocks": int(block_met.size),
        "blocks_below_target": int((~block_met).sum()),
        "blocks_at_floor": int(block_floor.sum()),
        "window_fidelity_min": float(judged.min()) if judged.size else None,
    }


def units_of(profile) -> dict:
    """``{channel name: unit or None}``: the JSON ``units`` map (numbers stay as measured).

    Parameters
    ----------
    profile : Profile
        A bound profile.

    Returns
    -------
    dict

    Examples
    --------
    >>> from codec import ChannelSpec, Profile
    >>> units_of(Profile(channels=(ChannelSpec(name="t", unit="K"), ChannelSpec(name="v"))))
    {'t': 'K', 'v': None}
    """
    return {c.name: c.unit for c in profile.channels}


def with_unit(value, unit: str | None, spec: str = ".4g", none: str = "n/a") -> str:
    """``value`` formatted, followed by its unit when the channel has one.

    Parameters
    ----------
    value : float or None
        The figure.
    unit : str or None
        Its unit.
    spec : str
        Format specification.
    none : str
        Text for a missing value.

    Returns
    -------
    str

    Examples
    --------
    >>> with_unit(0.123456, "K"), with_unit(0.5, None), with_unit(None, "K")
    ('0.1235 K', '0.5', 'n/a')
    """
    if value is None:
        return none
    text = format(value, spec)
    return f"{text} {unit}" if unit else text


def common_unit(units: dict) -> str | None:
    """The unit every channel shares, else None (a pooled error over mixed units stays bare)."""
    kinds = set(units.values())
    return next(iter(kinds)) if len(kinds) == 1 else None


def pooled_label(units: dict) -> str:
    """How to name figures pooled over every channel (a warning when their units differ).

    Parameters
    ----------
    units : dict
        ``{channel name: unit or None}`` (:func:`units_of`).

    Returns
    -------
    str

    Examples
    --------
    >>> pooled_label({"a": "K", "b": "K"})
    'pooled over 2 channels, all in K'
    >>> pooled_label({"a": "K", "b": "m/s"})[:47]
    'pooled over 2 channels of different units (domi'
    """
    kinds = {u for u in units.values()}
    if len(units) <= 1:
        return "all samples"
    if len(kinds) == 1 and None not in kinds:
        return f"pooled over {len(units)} channels, all in {next(iter(kinds))}"
    if kinds == {None}:
        return (f"pooled over {len(units)} channels (no units in the profile; see the "
                "per-channel table)")
    return (f"pooled over {len(units)} channels of different units (dominated by the largest; "
            "see the per-channel table)")


def channel_table(per_channel: dict, units: dict, fidelity_key: str = "fidelity_min",
                  fidelity_head: str = "fidelity min") -> list[str]:
    """One line per channel: bits/sample, SNR, PRD, max error (with unit), fidelity min.

    ``per_channel`` is the report's ``per_channel`` map; channels with no unit
    show ``-`` in the unit column and bare numbers.

    Parameters
    ----------
    per_channel : dict
        ``{channel name: figures}`` with ``bits_per_sample`` and the keys of
        :func:`error_figures`.
    units : dict
        ``{channel name: unit or None}``.
    fidelity_key, fidelity_head : str
        Which fidelity figure the last column shows, and its heading.

    Returns
    -------
    list of str
        A heading line and one line per channel.

    Examples
    --------
    >>> figs = {"bits_per_sample": 2.5, "snr_db": 30.0, "snr_ac_db": 20.0,
    ...         "prd_percent": 3.162, "max_abs_error": 0.25, "fidelity_min": 0.99}
    >>> for line in channel_table({"t": figs}, {"t": "K"}):
    ...     print(line)
    channel unit bits/sample   SNR dB SNR ac dB    PRD %        max error fidelity min
    t       K          2.500    30.00     20.00    3.162           0.25 K      0.99000
    """
    width = max([7] + [len(n) for n in per_channel])
    uw = max([4] + [len(u or "-") for u in units.values()])
    lines = [f"{'channel':<{width}} {'unit':<{uw}} {'bits/sample':>11} {'SNR dB':>8} "
             f"{'SNR ac dB':>9} {'PRD %':>8} {'max error':>16} {fidelity_head:>12}"]
    for name, f in per_channel.items():
        unit = units.get(name)
        lines.append(
            f"{name:<{width}} {unit or '-':<{uw}} {f['bits_per_sample']:>11.3f} "
            f"{_num(f.get('snr_db'), '.2f'):>8} {_num(f.get('snr_ac_db'), '.2f'):>9} "
            f"{_num(f.get('prd_percent'), '.3f'):>8} "
            f"{with_unit(f.get('max_abs_error'), unit):>16} "
            f"{_num(f.get(fidelity_key), '.5f'):>12}")
    return lines


def _num(value, spec: str) -> str:
    if value is None:
        return "n/a"
    if isinstance(value, float) and math.isinf(value):
        return "-inf" if value < 0 else "inf"
    return format(value, spec)
