"""Every JSON key of the codec's reports, built here and nowhere else.

The reports of ``encode``, ``decode``, ``roundtrip`` and ``receive`` are a
contract users' scripts rely on (keys are added, never renamed or dropped;
``tests/test_report_keys.py`` holds the golden key list of every command).
Callers hand in typed values (the encoder's :class:`EncodeTally`, the
decoder's :class:`DecoderCounts`, the existing result objects) and get back
the report as a plain dict ready for JSON.

Figures of merit (definitions written out in the README):

* SNR  = 10 log10( sum x^2 / sum (x - x_hat)^2 )  dB
* PRD  = 100 sqrt( sum (x - x_hat)^2 / sum x^2 )  %
* mean-removed variants use x - mean(x) in the numerator / denominator
  (``snr_ac_db`` and ``prdn_percent``), which is what matters for a channel
  that sits on a large offset.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, fields

import numpy as np

from ._status import STATUS_NAMES

__all__ = ["error_figures", "stream_report", "scope_figures", "units_of", "with_unit",
           "channel_table", "pooled_label", "common_unit", "EncodeTally", "encode_report",
           "per_frame_table",
           "time_column_report", "encode_command_report", "DecoderCounts", "FrameEvent",
           "StatusTally", "decode_report", "receive_report", "roundtrip_figures", "REFUSALS",
           "pack_report", "pack_command_report", "compare_report"]

#: Why the decoder refuses a CRC-valid frame: each is counted as ``frames_<why>``.
REFUSALS = ("foreign_profile", "bad_header", "duplicate", "conflict", "late", "beyond_end",
            "before_start")


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
    return _figures_of(*_error_sums(x, x_hat))


def _error_sums(x: np.ndarray, x_hat: np.ndarray) -> tuple[float, float, float, float]:
    """Error energy, peak error, signal energy and signal energy about each column's mean."""
    e = np.subtract(x, x_hat, dtype=np.float64)
    err = float(np.einsum("i,i->", e.ravel(), e.ravel()))
    peak = float(max(e.max(), -e.min())) if e.size else 0.0
    sig = float(np.einsum("i,i->", x.ravel(), x.ravel()))
    if x.size:  # the signal about its mean, in the error's buffer (no second full copy)
        np.subtract(x, x.mean(axis=0), out=e)
    sig_ac = float(np.einsum("i,i->", e.ravel(), e.ravel())) if x.size else 0.0
    return err, peak, sig, sig_ac


def _figures_of(err: float, peak: float, sig: float, sig_ac: float) -> dict:
    """:func:`error_figures` from the sums of :func:`_error_sums`."""
    return {
        "snr_db": _db(sig, err),
        "snr_ac_db": _db(sig_ac, err),
        "prd_percent": 100.0 * math.sqrt(err / sig) if sig else (0.0 if err == 0 else None),
        "prdn_percent": 100.0 * math.sqrt(err / sig_ac) if sig_ac else (0.0 if err == 0 else None),
        "max_abs_error": peak,
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
    """The figures of the encode and roundtrip reports, for the stream and per channel.

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

    Returns
    -------
    dict
        The stream's figures (bits, ratio, fidelity, SNR, PRD, peak error),
        ``channels``, ``reference``, ``basis``, ``frame_length``, the same
        figures per channel in ``per_channel`` and the ``units`` map.
    """
    raw = np.array([c.raw_bits_per_sample for c in profile.channels], dtype=np.float64)
    bits_total = int(frame_bits.sum()) + int(extra_bits)
    if frame_floor is None:
        frame_floor = np.zeros(frame_bits.size, dtype=bool)
    # each channel's error and signal sums once; every figure of all channels is a sum
    # (or the largest) of them, so the whole array is not passed over again
    sums = [_error_sums(x[:, c : c + 1], x_hat[:, c : c + 1]) for c in range(x.shape[1])]
    if sums:
        err, _, sig, sig_ac = (sum(v) for v in zip(*sums))
        pooled = (err, max(v[1] for v in sums), sig, sig_ac)
    else:
        pooled = _error_sums(x, x_hat)
    report = _figures(x, x_hat, profile, bits_total, raw.mean(), frame_fidelity, frame_met,
                      frame_floor, frame_bits.size, pooled)
    report["channels"] = x.shape[1]
    if header_bits is not None:
        report["header_bits_per_sample"] = (header_bits + int(extra_bits)) / x.size
    report["reference"] = profile.reference
    report["basis"] = profile.basis
    report["frame_length"] = profile.frame_length
    per = {}
    for c, spec in enumerate(profile.channels):
        sel = frame_channel == c
        per[spec.name] = _figures(
            x[:, c : c + 1], x_hat[:, c : c + 1], profile, int(frame_bits[sel].sum()),
            raw[c], frame_fidelity[sel], frame_met[sel], frame_floor[sel], int(sel.sum()),
            sums[c])
    report["per_channel"] = per
    report["units"] = units_of(profile)
    return report


def _figures(xs, xh, profile, bits, raw_bits, fid, met, floor, nframes, sums=None) -> dict:
    """Bits, fidelity and error figures of one set of frames (a channel, or every channel);
    ``sums``: its :func:`_error_sums`, when already known."""
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
    out.update(_figures_of(*(_error_sums(xs, xh) if sums is None else sums)))
    return out


def scope_figures(profile, block: np.ndarray, block_met: np.ndarray, block_floor: np.ndarray,
                  window_fidelity: np.ndarray, window_floor: np.ndarray) -> dict:
    """Report keys that say which budget scope holds and how the blocks fared.

    Parameters
    ----------
    profile : Profile
        The bound profile (its ``fidelity_scope``).
    block : ndarray
        Budget block of every frame (unused; kept for callers).
    block_met, block_floor : ndarray of bool
        Per budget block: whether it met its budget, whether it is held to the
        resolution floor.
    window_fidelity, window_floor : ndarray
        Per frame (one window of one channel): its own fidelity and floor flag.

    Returns
    -------
    dict
        ``fidelity_scope`` (the profile's); ``budget_blocks``, the budgets the
        stream was held to (one per window of each channel in window scope,
        one per channel per frame in frame scope); ``blocks_below_target``,
        those missed; ``blocks_at_floor``; ``window_fidelity_min``, the lowest
        single-window fidelity, which in frame scope may lie below the target
        (a quiet window next to a loud one).  The report's ``fidelity_min`` and
        ``fidelity_mean`` are over budget blocks.
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


# ---- encode ------------------------------------------------------------------------------------

@dataclass(frozen=True)
class EncodeTally:
    """What the encoder knows of its frames and budget blocks: the input of :func:`encode_report`.

    Per coded frame (one window of one channel, in the encoder's row order):
    ``frame_bits``, ``frame_channel``, ``frame_block`` (the budget block it is
    held to), ``window_fidelity`` and ``window_floor`` (its own fidelity, and
    whether it is held to the resolution floor).  Per budget block:
    ``block_fidelity``, ``block_met``, ``block_floor``.  Per stream:
    ``extra_bits`` (bits of no frame, e.g. gap-mask frames), ``header_bits``
    (bits that carry no coefficient), ``frames_on_wire`` (frames actually sent;
    a frame may carry several coded frames), ``frames_trellis`` (rows coded
    with dependent quantization), ``gap_policy`` and ``samples_gap``.
    """

    frame_bits: np.ndarray
    frame_channel: np.ndarray
    frame_block: np.ndarray
    window_fidelity: np.ndarray
    window_floor: np.ndarray
    block_fidelity: np.ndarray
    block_met: np.ndarray
    block_floor: np.ndarray
    frames_on_wire: int
    frames_trellis: int
    gap_policy: str
    samples_gap: int
    extra_bits: int = 0
    header_bits: int | None = None


def encode_report(x: np.ndarray, x_hat: np.ndarray, profile, tally: EncodeTally) -> dict:
    """The JSON report of :func:`codec.encode` (``EncodeResult.report``).

    Parameters
    ----------
    x, x_hat : ndarray
        Input and reconstruction, samples x channels.
    profile : Profile
        The bound profile.
    tally : EncodeTally
        The encoder's account of its frames and budget blocks.

    Returns
    -------
    dict
        :func:`stream_report` over the frames, each judged by its budget
        block, plus :func:`scope_figures` and ``frames_on_wire``,
        ``layout_version``, ``frames_trellis``, ``gap_policy``, ``samples_gap``.
    """
    t, block = tally, tally.frame_block
    report = stream_report(x, x_hat, profile, t.frame_bits, t.frame_channel,
                           t.block_fidelity[block], t.block_met[block], t.block_floor[block],
                           extra_bits=t.extra_bits, header_bits=t.header_bits)
    report.update(scope_figures(profile, block, t.block_met, t.block_floor, t.window_fidelity,
                                t.window_floor))
    # `frames` counts coded frames (one window of one channel); layouts 2 and 3 can carry
    # several of them under one header, so the frames actually sent are counted apart.
    report["frames_on_wire"] = int(t.frames_on_wire)
    report["layout_version"] = profile.layout_version
    report["frames_trellis"] = int(t.frames_trellis)
    report["gap_policy"] = t.gap_policy
    report["samples_gap"] = int(t.samples_gap)
    return report


def per_frame_table(frames: Mapping, fidelity: np.ndarray | None = None,
                    block_fidelity: np.ndarray | None = None) -> dict:
    """The per-frame part of a JSON report, one list per column (compact for long streams).

    Parameters
    ----------
    frames : mapping of ndarray
        ``EncodeResult.frames``.
    fidelity, block_fidelity : ndarray, optional
        Per frame and per budget block fidelity to report instead of the
        encoder's own (the round trip's, recomputed on the decoded samples).

    Returns
    -------
    dict
        ``window``, ``channel``, ``bits``, ``terms``, ``step``, ``fidelity``,
        ``at_floor``, ``met``, ``budget_block`` (the budget each frame is held
        to; in frame scope shared by the windows of one channel in one frame)
        and ``block_fidelity`` (that block's fidelity, the figure the target
        applies to).
    """
    from .quantize.steps import step_from_code

    block = frames["block"]
    bfid = frames["block_fidelity"] if block_fidelity is None else block_fidelity
    return {
        "window": frames["window"], "channel": frames["channel"], "bits": frames["bits"],
        "terms": frames["terms"], "step": step_from_code(frames["step_code"]),
        "fidelity": frames["fidelity"] if fidelity is None else fidelity,
        "at_floor": frames["floor"], "met": frames["met"],
        "budget_block": block, "block_fidelity": bfid[block],
    }


def time_column_report(name: str | None, fields: Mapping) -> dict:
    """The ``time_column`` object of the encode report: which time column was kept, and how.

    Parameters
    ----------
    name : str or None
        The input's time column name.
    fields : mapping
        The stream note's time fields (``codec._timecol.time_fields``; empty
        when the input has no time column).

    Returns
    -------
    dict
        ``name`` (None without a time column), ``kept`` (``ticks``,
        ``float64``, ``regular`` or None) and ``resolution`` (the time
        column's decimal step, or None).
    """
    kept = next((k for k, key in (("ticks", "time_ticks"), ("float64", "time_float64"),
                                   ("regular", "time_start_ticks")) if key in fields), None)
    return {"name": name if fields else None, "kept": kept,
            "resolution": 10.0 ** -fields["time_decimals"] if "time_decimals" in fields
            else None}


def encode_command_report(result, time_column: dict) -> dict:
    """The JSON the ``encode`` command writes: the encoder's report, time column, frames.

    Parameters
    ----------
    result : EncodeResult
        What :func:`codec.encode` returned.
    time_column : dict
        :func:`time_column_report` of the input.

    Returns
    -------
    dict
        ``result.report`` with ``time_column`` and ``per_frame`` added.
    """
    return {**result.report, "time_column": time_column,
            "per_frame": per_frame_table(result.frames)}


# ---- decode ------------------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class DecoderCounts(Mapping):
    """Frame and sample counts of a decoder (``StreamDecoder.counts()``, ``DecodeResult.counts``).

    Every field is a JSON key of the decode and receive reports, and the
    object reads as a mapping of them too (``counts["frames_ok"]``), so a
    report is built from it directly.  ``frames_<why>`` counts CRC-valid
    frames refused for each reason of :data:`REFUSALS` (zero when none was);
    ``samples_<status>`` counts released samples by status
    (``samples_delivered + samples_lost + samples_gap + samples_concealed =
    samples x channels``).

    Attributes
    ----------
    frames_ok, gap_frames_ok : int
        Data frames and gap-mask frames accepted.
    frames_foreign_profile, frames_bad_header, frames_duplicate, frames_conflict
        CRC-valid frames refused, by reason (:data:`REFUSALS`).
    frames_late, frames_beyond_end, frames_before_start
        Likewise.
    frames_crc_failed, bytes_in, bytes_skipped : int
        Frame candidates failing their CRC, bytes read, bytes in no accepted frame.
    samples, samples_lost, samples_delivered, samples_gap, samples_concealed : int
        Samples released (per channel), and sample counts by status over all channels.
    end_known : bool
        Whether the stream's end is certain.
    discontinuities, windows_cut, events_listed : int
        Sequence jumps, windows cut by ``--max-fill``, events kept in the list.

    Examples
    --------
    A clean stream: every frame accepted, every sample delivered, nothing refused.

    >>> import numpy as np, codec
    >>> x = np.cumsum(np.random.default_rng(1).standard_normal((256, 2)), axis=0)
    >>> enc = codec.encode(x, codec.default_profile())
    >>> c = codec.decode(enc.data, enc.profile, samples=256).counts
    >>> c["samples_delivered"] == 256 * 2, c.frames_refused, c.samples_lost
    (True, 0, 0)
    """

    frames_ok: int = 0
    gap_frames_ok: int = 0
    frames_foreign_profile: int = 0
    frames_bad_header: int = 0
    frames_duplicate: int = 0
    frames_conflict: int = 0
    frames_late: int = 0
    frames_beyond_end: int = 0
    frames_before_start: int = 0
    frames_crc_failed: int = 0
    bytes_in: int = 0
    bytes_skipped: int = 0
    samples: int = 0
    samples_lost: int = 0
    samples_delivered: int = 0
    samples_gap: int = 0
    samples_concealed: int = 0
    end_known: bool = False
    discontinuities: int = 0
    windows_cut: int = 0
    events_listed: int = 0

    @property
    def frames_refused(self) -> int:
        """CRC-valid frames refused for any reason of :data:`REFUSALS`."""
        return sum(getattr(self, f"frames_{why}") for why in REFUSALS)

    def __getitem__(self, key: str):
        if key not in _COUNT_KEYS:
            raise KeyError(key)
        return getattr(self, key)

    def __iter__(self) -> Iterator[str]:
        return iter(_COUNT_KEYS)

    def __len__(self) -> int:
        return len(_COUNT_KEYS)


_COUNT_KEYS = tuple(f.name for f in fields(DecoderCounts))


@dataclass(frozen=True, eq=False)
class FrameEvent(Mapping):
    """What happened to a frame that did not make it into the output: one entry of ``events``.

    ``event`` is a reason of :data:`REFUSALS` or ``discontinuity``; ``offset``
    the frame's byte offset in the stream (unstuffed); ``window`` and
    ``channel`` where a misplaced frame would have gone; ``detail`` why its
    header was refused, in words; ``windows_cut`` the lost windows a
    discontinuity left out.  Reads as a mapping of the fields that apply (the
    JSON object), so each event lists only its own keys.
    """

    event: str
    offset: int
    window: int | None = None
    channel: int | None = None
    detail: str | None = None
    windows_cut: int | None = None

    def _present(self) -> list[str]:
        return [k for k in _EVENT_FIELDS if getattr(self, k) not in (None, "")]

    def __getitem__(self, key: str):
        if key not in self._present():
            raise KeyError(key)
        return getattr(self, key)

    def __iter__(self) -> Iterator[str]:
        return iter(self._present())

    def __len__(self) -> int:
        return len(self._present())


_EVENT_FIELDS = tuple(f.name for f in fields(FrameEvent))


class StatusTally:
    """Samples of each status per channel, summed over the decoder's released blocks."""

    def __init__(self, channels: int):
        self.counts = np.zeros((len(STATUS_NAMES), channels), dtype=np.int64)  # status x channel

    def add(self, blocks) -> None:
        """Count the status codes of released blocks (anything with a ``status`` array)."""
        for b in blocks:
            for code in STATUS_NAMES:
                self.counts[code] += (b.status == code).sum(axis=0)

    def per_channel(self, names: list[str]) -> dict:
        """``{channel: {samples_<status>: count}}``, the report's ``per_channel`` object."""
        return {n: {f"samples_{STATUS_NAMES[k]}": int(self.counts[k, c]) for k in STATUS_NAMES}
                for c, n in enumerate(names)}


def decode_report(counts: DecoderCounts, profile, tally: StatusTally, events: list,
                  stuffing: str | None = None, packets_bad: int = 0,
                  packets_overlong: int = 0) -> dict:
    """The JSON report of the ``decode`` command.

    Parameters
    ----------
    counts : DecoderCounts
        The decoder's counts after it was closed.
    profile : Profile
        The bound profile the stream was decoded with.
    tally : StatusTally
        Samples of each status per channel.
    events : list of FrameEvent
        The decoder's event list (capped).
    stuffing : str, optional
        The SLIP or COBS stuffing undone before decoding, with
        ``packets_bad`` and ``packets_overlong`` from the unstuffer.

    Returns
    -------
    dict
        Every field of ``counts`` plus ``channels``, ``bits_total``, the
        stuffing keys (only for a stuffed stream), ``status_codes``,
        ``per_channel``, ``units``, ``events`` and ``samples_check``.
    """
    names = [c.name for c in profile.channels]
    report = dict(counts)
    report["channels"] = len(names)
    report["bits_total"] = 8 * counts.bytes_in
    if stuffing is not None:
        report["stuffing"] = stuffing
        report["packets_bad"] = int(packets_bad)
        report["packets_overlong"] = int(packets_overlong)
    report["status_codes"] = {str(k): v for k, v in STATUS_NAMES.items()}
    report["per_channel"] = tally.per_channel(names)
    report["units"] = units_of(profile)
    report["events"] = [dict(e) for e in events]
    report["samples_check"] = ("samples_delivered + samples_lost + samples_gap + "
                               "samples_concealed = samples x channels")
    return report


def receive_report(counts: DecoderCounts, channels: int, events: list, datagrams: int,
                   seconds: float, stopped: str | None, per_channel: dict | None = None,
                   units: dict | None = None) -> dict:
    """The JSON report of the ``receive`` command (frames arriving as UDP datagrams).

    Parameters
    ----------
    counts : DecoderCounts
        The decoder's counts after it was closed.
    channels : int
        Channels of the stream.
    events : list of FrameEvent
        The decoder's event list (capped).
    datagrams, seconds, stopped
        Datagrams read, seconds listened, and why the receiver stopped
        (``complete``, ``duration``, ``idle``, a signal's name,
        ``interrupted`` or ``error``).
    per_channel : dict, optional
        ``{channel name: {samples_<status>, delivered_min, delivered_max}}``.
    units : dict, optional
        ``{channel name: unit or None}``, the units of ``delivered_min/max``.

    Returns
    -------
    dict
        Every field of ``counts`` plus ``datagrams``, ``seconds``, ``stopped``,
        ``channels`` and ``events``, and ``per_channel`` and ``units`` when given.

    Examples
    --------
    >>> r = receive_report(DecoderCounts(frames_ok=3, samples=64), 1, [], 3, 0.5, "complete",
    ...                    units={"t": "K"})
    >>> r["frames_ok"], r["datagrams"], r["stopped"], r["units"], "per_channel" in r
    (3, 3, 'complete', {'t': 'K'}, False)
    """
    out = {**counts, "datagrams": int(datagrams), "seconds": float(seconds),
           "stopped": stopped, "channels": int(channels), "events": [dict(e) for e in events]}
    if per_channel is not None:
        out["per_channel"] = per_channel
    if units is not None:
        out["units"] = units
    return out


# ---- roundtrip ---------------------------------------------------------------------------------

def roundtrip_figures(values: np.ndarray, enc, dec) -> tuple[dict, bool]:
    """The ``roundtrip`` report: every budget block checked again on the decoded samples.

    Independent of the encoder's own check: the error energy of every frame
    is recomputed from ``values - dec.samples`` over its real samples and
    judged against its budget block (window scope: per window; frame scope:
    the windows of one channel in one frame together).

    Parameters
    ----------
    values : ndarray
        The input, samples x channels.
    enc : EncodeResult
        The encoder's result for ``values``.
    dec : DecodeResult
        The decoder's result for ``enc.data`` (every sample delivered).

    Returns
    -------
    report : dict
        The encoder's report with the fidelity figures, the error figures and
        ``per_frame`` replaced by the recomputed ones, plus ``decoded_check``.
    ok : bool
        Whether every budget block meets its target on the decoded samples.
    """
    from .quantize.select import check_blocks
    from .transform.framing import split_frames

    n, info = enc.profile.frame_length, enc.frames
    e, valid, _, _ = split_frames(values - dec.samples, n)
    e = np.where(np.arange(n) < valid[:, None], e, 0.0)
    err_rows = np.einsum("ij,ij->i", e, e)  # window-major rows: window * channels + channel
    err = err_rows[info["window"] * values.shape[1] + info["channel"]]
    e_ref = info["reference_energy"]
    fidelity = np.where(e_ref > 0, 1.0 - err / np.where(e_ref > 0, e_ref, 1.0), 1.0)
    blk = check_blocks(err, info["block"], info["block_budget"], info["block_reference_energy"])
    met = blk.met[info["block"]]
    # every frame carries its budget block's fidelity, as in the encoder's report: the
    # mean is over frames, the minimum over blocks alike
    row_fid = blk.fidelity[info["block"]]
    row_floor = info["block_floor"][info["block"]]
    report = dict(enc.report)
    report.update(_fidelity_figures(row_fid, row_floor, met))
    report["blocks_below_target"] = int((~blk.met).sum())
    report["decoded_check"] = (f"error energy per budget block ({enc.profile.fidelity_scope} "
                               "scope) recomputed from the decoded samples")
    report.update(error_figures(values, dec.samples))
    per = {}
    for c, (name, figs) in enumerate(report["per_channel"].items()):
        mine = info["channel"] == c
        per[name] = {**figs, **error_figures(values[:, c:c + 1], dec.samples[:, c:c + 1]),
                     **_fidelity_figures(row_fid[mine], row_floor[mine], met[mine])}
    report["per_channel"] = per
    report["per_frame"] = per_frame_table({**info, "met": met}, fidelity, blk.fidelity)
    return report, bool(met.all())


def _fidelity_figures(fid: np.ndarray, floor: np.ndarray, met: np.ndarray) -> dict:
    """Lowest and mean fidelity of the frames not held to the floor, and frames that missed."""
    judged = fid[~floor]
    return {"fidelity_min": float(judged.min()) if judged.size else None,
            "fidelity_mean": float(judged.mean()) if judged.size else None,
            "frames_below_target": int((~met).sum())}


# ---- pack --------------------------------------------------------------------------------------

def pack_report(data: bytes, pack: bytes, samples: int, dictionary: bytes | None) -> dict:
    """Bits of a pack against per-frame coding of the same stream, per input sample.

    Parameters
    ----------
    data : bytes
        The stream as frames.
    pack : bytes
        Its pack (``codec.stream.packs.make_pack``).
    samples : int
        Input samples the stream carries (samples x channels).
    dictionary : bytes or None
        The zstd dictionary both ends hold (its size is reported, not counted).

    Returns
    -------
    dict
        ``per_frame_bits``, ``pack_bits``, ``bits_saved``, ``saved_percent``,
        the two per sample, ``dictionary_bytes``, ``verdict`` (in words, also
        when the pack costs more) and ``frames``.
    """
    from .stream.search import locate_frames

    per_frame = 8 * len(data)
    packed = 8 * len(pack)
    saved = per_frame - packed
    return {
        "per_frame_bits": per_frame,
        "pack_bits": packed,
        "bits_saved": saved,
        "saved_percent": 100.0 * saved / per_frame if per_frame else 0.0,
        "per_frame_bits_per_sample": per_frame / samples,
        "pack_bits_per_sample": packed / samples,
        "dictionary_bytes": len(dictionary) if dictionary else 0,
        "verdict": ("the pack saves bits" if saved > 0 else
                    "the pack saves nothing: send the frames as they are"),
        "frames": int(np.size(locate_frames(data).offsets)),
    }


def pack_command_report(base: dict, samples: int, channels: int,
                        dictionary_sha256: str | None, zstd_dictionary_id: int,
                        written: bool) -> dict:
    """The JSON the ``pack`` command writes: :func:`pack_report` and where the pack stands.

    Parameters
    ----------
    base : dict
        :func:`pack_report` of the stream and its pack.
    samples, channels : int
        Samples per channel (the stream note's) and channels.
    dictionary_sha256 : str or None
        SHA-256 (hex) of the dictionary file, None without one.
    zstd_dictionary_id : int
        The dictionary id the pack's zstd frame names (0: none).
    written : bool
        Whether the pack was written (``--only-if-smaller`` may skip it).

    Returns
    -------
    dict
        ``base`` plus ``samples``, ``channels``, ``dictionary_sha256``,
        ``zstd_dictionary_id`` and ``pack_written``.
    """
    return {**base, "samples": int(samples), "channels": int(channels),
            "dictionary_sha256": dictionary_sha256,
            "zstd_dictionary_id": int(zstd_dictionary_id), "pack_written": bool(written)}


# ---- compare -----------------------------------------------------------------------------------

def compare_report(cmp, profile, input_name: str | None = None) -> dict:
    """The JSON report of ``compare`` (and the demo's ``*.compare.json``).

    Parameters
    ----------
    cmp : Comparison
        What :func:`codec.compare_bases` returned.
    profile : Profile
        The profile the comparison ran under (bound to the channels or not).
    input_name : str, optional
        The input file, as the user named it (the demo leaves it out).

    Returns
    -------
    dict
        ``input`` (when given), ``frame_length``, ``fidelity_scope``,
        ``train_samples``, ``test_samples``, ``scoring``, ``rows`` (one per
        basis, fidelity and channel, and ``all``), ``units`` (the rows' errors
        are in each channel's unit) and ``klt`` (the trained basis's note) when
        a basis was trained.

    Examples
    --------
    >>> import numpy as np, codec
    >>> x = np.cumsum(np.random.default_rng(2).standard_normal((1024, 1)), axis=0)
    >>> p = codec.default_profile()
    >>> cmp = codec.compare_bases(x, p, ["dct", "haar"], [0.99])
    >>> r = compare_report(cmp, p, "x.csv")
    >>> r["input"], r["frame_length"], sorted({row["basis"] for row in r["rows"]})
    ('x.csv', 64, ['dct', 'haar', 'identity'])

    (the identity basis, the samples themselves, is always scored as the baseline
    that ``bits_saved_percent`` is measured against.)
    """
    report = {} if input_name is None else {"input": str(input_name)}
    report.update({
        "frame_length": cmp.frame_length, "fidelity_scope": profile.fidelity_scope,
        "train_samples": cmp.train_samples, "test_samples": cmp.test_samples,
        "scoring": "trained bases are fitted on the first train_samples samples; every basis "
                   "is scored on the remaining test_samples",
        "rows": cmp.rows,
        # errors in the rows are in each channel's unit (SI numbers as measured)
        "units": units_of(profile.bind(cmp.names)),
    })
    if cmp.trained is not None:
        report["klt"] = cmp.trained.note.model_dump()
    return report

