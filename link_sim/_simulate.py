"""Monte-Carlo link simulation: codec frames -> FEC -> channel -> FEC decoder -> receiver.

One trial sends the whole coded stream once.  Every figure is computed per
trial; over K trials the report gives the mean and a 95% confidence interval
(Student t on the trial means, the usual interval for K independent
replications).  Eb is the energy per *codec* bit: all overhead on air (FEC
parity, block padding, sync markers, trellis tail) is charged to it, so a code
only shows a gain if it pays for its own bits.

Sample figures: ``*_delivered`` are over the samples that arrived in frames
that passed the CRC; ``*_end_to_end`` over every sample the receiver outputs a
value for (delivered + concealed).  Lost samples have no value; they are
counted in ``samples_lost`` and left out of those figures, except
``fidelity_end_to_end``, which is over every input sample and counts a lost
sample's whole energy as error (``fidelity_end_to_end_counts`` says so).  Frame counts:
``frames_delivered`` counts every frame that reached the output, including the
``frames_undetected_errors`` among them; ``frames_sent = frames_delivered +
frames_dropped_crc + frames_erased``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from scipy import stats

import codec
from codec import locate_frames, units_of

from ._channels import GilbertElliott, awgn, bsc, erase_frames, gilbert_elliott
from ._fec import make_code
from ._receiver import CONCEALED, DELIVERED, LOST, receive
from ._registry import NamedRegistry
from ._theory import ber_theory

__all__ = ["ChannelConfig", "CHANNEL_KINDS", "channel_kinds", "register_channel",
           "unregister_channel", "transmit_bits", "run_trial", "simulate", "sweep",
           "measured_ber_curve", "ci95", "zero_error_bound", "SweepSeries", "sweep_series",
           "sweep_figure", "plot_sweep"]


@dataclass(frozen=True)
class ChannelConfig:
    """Which channel and its parameters.

    ``ber`` is the BSC error rate (or the good-state rate of ``burst``),
    ``ebn0_db`` the AWGN Eb/N0, ``burst_length_bits``/``bad_fraction``/
    ``ber_bad`` the Gilbert-Elliott bad state, ``loss_rate`` the chance that a
    whole frame never arrives (any channel; the ``erasure`` channel has only that).

    Parameters
    ----------
    kind : {"bsc", "awgn", "burst", "erasure"}
        The channel model.
    ber : float
        BSC error rate, or the good-state rate of ``burst``.
    ebn0_db : float
        AWGN Eb/N0 per information bit, dB.
    modulation : {"bpsk", "qpsk"}
        AWGN modulation.
    burst_length_bits, bad_fraction, ber_bad : float
        Gilbert-Elliott bad state: mean stay, long-run share, error rate.
    loss_rate : float
        Probability that a whole frame never arrives.

    Examples
    --------
    >>> from dataclasses import replace
    >>> cfg = ChannelConfig(kind="awgn", ebn0_db=4.0)
    >>> replace(cfg, ebn0_db=8.0).ebn0_db, cfg.modulation
    (8.0, 'bpsk')
    """

    kind: str = "awgn"
    ber: float = 0.0
    ebn0_db: float = 6.0
    modulation: str = "bpsk"
    burst_length_bits: float = 20.0
    bad_fraction: float = 0.01
    ber_bad: float = 0.5
    loss_rate: float = 0.0


#: How each channel acts on the bits on air: ``f(bits, cfg, rng, rate, soft)``; the
#: functions themselves live in ``_channels.py``.  A new channel model is one function
#: in its own file plus one line here or one :func:`register_channel` call
#: (DEVELOPERS.md, "Adding a channel model").
Transmit = Callable[[np.ndarray, "ChannelConfig", np.random.Generator, float, bool], np.ndarray]
_CHANNELS = NamedRegistry("channel model", {
    "bsc": lambda bits, cfg, rng, rate, soft: bsc(bits, cfg.ber, rng),
    "awgn": lambda bits, cfg, rng, rate, soft: awgn(bits, cfg.ebn0_db, rng, cfg.modulation,
                                                    rate=rate, soft=soft),
    "burst": lambda bits, cfg, rng, rate, soft: gilbert_elliott(
        bits, GilbertElliott(cfg.burst_length_bits, cfg.bad_fraction, cfg.ber, cfg.ber_bad), rng),
    # whole frames lost (cfg.loss_rate, applied to every channel), no bit errors
    "erasure": lambda bits, cfg, rng, rate, soft: bits.copy(),
})

#: The names of the built-in channel models, in the order the command line lists them.
CHANNEL_KINDS = _CHANNELS.builtins


def register_channel(name: str, transmit: Transmit) -> None:
    """Offer a further channel model to ``simulate`` (``--channel NAME``).

    Parameters
    ----------
    name : str
        The new model's name.
    transmit : callable
        ``transmit(bits, cfg, rng, rate, soft) -> received``: ``bits`` are uint8 0/1,
        ``cfg`` the :class:`ChannelConfig`, ``rng`` the trial's generator, ``rate`` the
        FEC code rate (information bits per channel bit), ``soft`` whether the decoder
        wants matched-filter values (float32, positive means 0) instead of hard bits.

    Examples
    --------
    >>> import numpy as np
    >>> from link_sim import ChannelConfig, channel_kinds, register_channel, transmit_bits
    >>> register_channel("invert", lambda bits, cfg, rng, rate, soft: bits ^ 1)
    >>> "invert" in channel_kinds()
    True
    >>> transmit_bits(np.array([0, 1, 1], np.uint8), ChannelConfig("invert"),
    ...               np.random.default_rng(0), 1.0, False).tolist()
    [1, 0, 0]
    >>> unregister_channel("invert")
    """
    _CHANNELS.add(name, transmit)


def unregister_channel(name: str) -> None:
    """Withdraw a model added by :func:`register_channel` (the built-in ones stay).

    Parameters
    ----------
    name : str
        The registered name; an unknown name is ignored.

    Examples
    --------
    >>> unregister_channel("awgn")
    Traceback (most recent call last):
    ...
    ValueError: the built-in channel model 'awgn' cannot be withdrawn
    """
    _CHANNELS.remove(name)


def channel_kinds() -> tuple[str, ...]:
    """Every channel model on offer: the built-in ones, then the registered ones.

    Returns
    -------
    tuple of str
        In the order the command line lists them.

    Examples
    --------
    >>> channel_kinds()[:4]
    ('bsc', 'awgn', 'burst', 'erasure')
    """
    return _CHANNELS.names()


def transmit_bits(bits: np.ndarray, cfg: ChannelConfig, rng: np.random.Generator,
                  rate: float, soft: bool) -> np.ndarray:
    """Pass channel bits through the channel model ``cfg.kind``.

    Parameters
    ----------
    bits : ndarray of uint8
        Channel bits, 0/1.
    cfg : ChannelConfig
        The model and its parameters.
    rng : numpy.random.Generator
        The trial's generator (never global random state).
    rate : float
        The FEC code rate: AWGN's Es/N0 per channel bit is rate x Eb/N0.
    soft : bool
        Matched-filter values (float32, positive means 0) for AWGN instead of hard bits.

    Returns
    -------
    ndarray
        What the receiver sees, one value per channel bit.

    Examples
    --------
    A BSC with crossover 0.1 flips about a tenth of the bits:

    >>> import numpy as np
    >>> bits = np.zeros(100_000, np.uint8)
    >>> out = transmit_bits(bits, ChannelConfig("bsc", ber=0.1), np.random.default_rng(1),
    ...                     1.0, False)
    >>> round(float(out.mean()), 2)
    0.1
    """
    return _CHANNELS.get(cfg.kind)(bits, cfg, rng, rate, soft)


def _hard(received: np.ndarray) -> np.ndarray:
    return (received < 0).view(np.uint8) if received.dtype != np.uint8 else received


def _bit_errors(a: np.ndarray, b: np.ndarray) -> int:
    """Bit errors between two byte arrays (popcount of XOR)."""
    return int(np.unpackbits(np.bitwise_xor(a, b)).sum())


def run_trial(x: np.ndarray, enc, code, cfg: ChannelConfig, rng: np.random.Generator,
              policy: str = "hold") -> dict:
    """Send the coded stream ``enc`` (codec.EncodeResult of ``x``) once; return its figures.

    Parameters
    ----------
    x : ndarray, shape (samples, channels)
        The input samples.
    enc : codec.EncodeResult
        ``codec.encode(x, profile)``.
    code : Code
        The FEC code (:func:`make_code`).
    cfg : ChannelConfig
        The channel.
    rng : numpy.random.Generator
        The random source.
    policy : str
        Concealment policy.

    Returns
    -------
    dict
        Channel and decoded bit error rates, frame and sample accounts,
        fidelity, SNR and peak error of the delivered samples and end to end.

    Examples
    --------
    A channel that loses every frame delivers nothing:

    >>> import numpy as np, codec
    >>> x = np.sin(np.arange(2048) / 30.0)[:, None]
    >>> enc = codec.encode(x, codec.default_profile())
    >>> cfg = ChannelConfig(kind="erasure", loss_rate=1.0)
    >>> t = run_trial(x, enc, make_code("none"), cfg, np.random.default_rng(0))
    >>> t["frames_sent"], t["frames_delivered"], t["samples_lost"]
    (2, 0, 2048)
    """
    tx = np.frombuffer(enc.data, np.uint8)
    lengths = locate_frames(enc.data).lengths  # a frame may carry several windows/channels
    air = code.encode(tx)
    rate = 8.0 * tx.size / air.size
    received = transmit_bits(air, cfg, rng, rate, code.soft)
    ch_errors = int(np.count_nonzero(_hard(received) != air))
    rx, dstats = code.decode(received, tx.size)
    arrived = erase_frames(lengths.size, cfg.loss_rate, rng)
    rec = receive(rx.tobytes(), enc.data, arrived, lengths, enc.profile, x.shape[0], policy)

    have = rec.status != LOST
    dl = rec.status == DELIVERED
    fig_d = codec.error_figures(x[dl], rec.samples[dl]) if dl.any() else {}
    fig_a = codec.error_figures(x[have], rec.samples[have]) if have.any() else {}
    sig = float(np.einsum("i,i->", x.ravel(), x.ravel()))
    sig_d = float(np.einsum("i,i->", x[dl], x[dl]))
    # End to end every input sample counts: a lost sample (not concealed, as asked with
    # --conceal none, or with nothing to conceal from) has no output, so its whole energy
    # is error; a concealed one counts with its concealed value.
    lost_energy = float(np.einsum("i,i->", x[~have], x[~have]))
    per_channel = {}
    for c, spec in enumerate(enc.profile.channels):
        hc, xc = have[:, c], x[:, c]
        f = codec.error_figures(xc[hc], rec.samples[hc, c]) if hc.any() else {}
        sc = float(xc @ xc)
        ec = f.get("error_energy", 0.0) + float(xc[~hc] @ xc[~hc])
        per_channel[spec.name] = {
            "samples_lost": int((~hc).sum()),
            "snr_db": f.get("snr_db"), "snr_ac_db": f.get("snr_ac_db"),
            "prd_percent": f.get("prd_percent"), "max_abs_error": f.get("max_abs_error"),
            "fidelity_end_to_end": (1.0 - ec / sc) if sc else None}
    sent = int(lengths.size)
    erased = int((~arrived).sum())
    return {
        "ebn0_db": cfg.ebn0_db if cfg.kind == "awgn" else None,
        "ber_channel": ch_errors / air.size,
        "ber_post_fec": _bit_errors(rx, tx) / (8 * tx.size),
        "codewords": dstats.codewords, "codewords_failed": dstats.codewords_failed,
        "frames_sent": sent, "frames_erased": erased,
        "frames_delivered": rec.frames_delivered,
        "frames_dropped_crc": max(sent - erased - rec.frames_delivered, 0),
        "frames_undetected_errors": rec.frames_undetected_errors,
        "frames_rejected_header": rec.frames_rejected_header,
        "frames_out_of_range": rec.frames_out_of_range,
        "frame_error_rate": 1.0 - (rec.frames_delivered - rec.frames_undetected_errors) / sent,
        "samples_in": int(x.size),
        "samples_delivered": int(dl.sum()),
        "samples_concealed": int((rec.status == CONCEALED).sum()),
        "samples_lost": int((rec.status == LOST).sum()),
        "samples_out_of_range": int(rec.out_of_range.sum()),
        "snr_db_delivered": fig_d.get("snr_db"),
        "max_abs_error_delivered": fig_d.get("max_abs_error"),
        "fidelity_delivered": (1.0 - fig_d["error_energy"] / sig_d) if fig_d and sig_d else None,
        "snr_db_end_to_end": fig_a.get("snr_db"),
        "max_abs_error_end_to_end": fig_a.get("max_abs_error"),
        "fidelity_end_to_end": (1.0 - (fig_a.get("error_energy", 0.0) + lost_energy) / sig)
        if sig else None,
        "per_channel": per_channel,
    }


def ci95(values) -> tuple[float | None, list | None]:
    """Mean and 95% Student-t interval of per-trial values (None entries skipped).

    Parameters
    ----------
    values : iterable of float or None
        One value per trial.

    Returns
    -------
    mean : float or None
        None when no value is finite.
    interval : list of float or None
        ``[low, high]``; None with fewer than two values.

    Examples
    --------
    Values 1, 2, 3: mean 2, s = 1, t(0.975, 2 dof) = 4.303 (Student-t table),
    half-width 4.303 / sqrt(3) = 2.484:

    >>> m, (low, high) = ci95([1.0, 2.0, 3.0, None])
    >>> m, round(low, 3), round(high, 3)
    (2.0, -0.484, 4.484)
    """
    v = np.array([x for x in values if x is not None and math.isfinite(x)], dtype=np.float64)
    if v.size == 0:
        return None, None
    m = float(v.mean())
    if v.size < 2:
        return m, None
    half = float(stats.t.ppf(0.975, v.size - 1) * v.std(ddof=1) / math.sqrt(v.size))
    return m, [m - half, m + half]


def simulate(x, profile, cfg: ChannelConfig, fec: str = "none", interleave: int = 1,
             trials: int = 1, seed: int = 0, policy: str = "hold", enc=None,
             on_trial=None) -> dict:
    """Encode ``x`` under ``profile`` and run ``trials`` independent trials over ``cfg``.

    Returns one report row: every per-trial figure as its mean over trials,
    ``<key>_ci95`` beside it, plus the bits on air.  ``on_trial()``, when
    given, is called after each trial (progress reports).

    Parameters
    ----------
    x : array_like, shape (samples, channels)
        The input samples.
    profile : codec.Profile
        The codec profile.
    cfg : ChannelConfig
        The channel.
    fec : str
        FEC code name (:data:`FEC_NAMES`).
    interleave : int
        RS interleaving depth.
    trials : int
        Independent trials.
    seed : int
        Seed of the trials' random generator.
    policy : str
        Concealment policy.
    enc : codec.EncodeResult, optional
        ``x`` already encoded under ``profile``.
    on_trial : callable, optional
        Called after each trial.

    Returns
    -------
    dict
        The report row.

    Examples
    --------
    At 12 dB uncoded BPSK errs about once in 10**8 bits (Q(sqrt(2 x 10**1.2)),
    Proakis 4.3), so a short stream arrives whole:

    >>> import numpy as np, codec
    >>> x = np.sin(np.arange(2048) / 30.0)[:, None]
    >>> row = simulate(x, codec.default_profile(), ChannelConfig(ebn0_db=12.0), trials=2)
    >>> row["frames_delivered"] == row["frames_sent"], row["samples_lost"]
    (True, 0.0)
    >>> bool(np.isclose(row["ber_channel_theory"], ber_theory("bpsk", 12.0)))
    True
    """
    x = codec.as_samples(x)
    enc = enc if enc is not None else codec.encode(x, profile)
    code = make_code(fec, interleave)
    rng = np.random.default_rng(seed)
    rows = []
    for _ in range(trials):
        rows.append(run_trial(x, enc, code, cfg, rng, policy))
        if on_trial is not None:
            on_trial()
    codec_bits = 8 * len(enc.data)
    air_bits = code.channel_bits(len(enc.data))
    nf = rows[0]["frames_sent"]
    out = {"ebn0_db": rows[0]["ebn0_db"], "channel": cfg.kind,
           "modulation": cfg.modulation if cfg.kind == "awgn" else None,
           "fec": fec, "interleave": interleave if fec == "rs255" else None,
           "conceal": policy, "trials": trials, "seed": seed,
           "bits_codec": codec_bits, "bits_on_air": air_bits,
           "bits_fec_overhead": air_bits - codec_bits,
           "bits_codec_per_frame": codec_bits / nf,
           "bits_on_air_per_frame": air_bits / nf,
           "bits_codec_per_sample": codec_bits / x.size,
           "bits_on_air_per_sample": air_bits / x.size,
           "snr_db_codec_only": enc.report.get("snr_db") if isinstance(enc.report, dict) else None}
    if cfg.kind == "awgn":
        p = float(ber_theory(cfg.modulation, cfg.ebn0_db + 10 * math.log10(codec_bits / air_bits)))
        out["ber_channel_theory"] = p
        if fec == "none":  # a frame survives only if all its bits do (independent errors)
            frame_bits = 8 * locate_frames(enc.data).lengths
            out["frame_error_rate_theory"] = float(np.mean(1.0 - (1.0 - p) ** frame_bits))
    out["fidelity_end_to_end_counts"] = (
        "every input sample: concealed samples with their concealed values"
        f" ({policy}), lost samples as missing (their whole energy counts as error)")
    per = [r.pop("per_channel") for r in rows]
    out["per_channel_end_to_end"] = {  # mean over trials
        name: {k: (None if any(p[name][k] is None for p in per)
                   else float(np.mean([p[name][k] for p in per]))) for k in per[0][name]}
        for name in per[0]}
    if isinstance(enc.report, dict) and "per_channel" in enc.report:
        for name, f in out["per_channel_end_to_end"].items():
            f["bits_codec_per_sample"] = enc.report["per_channel"][name]["bits_per_sample"]
    out["units"] = units_of(enc.profile)
    for key in rows[0]:
        if key == "ebn0_db":
            continue
        vals = [r[key] for r in rows]
        m, ci = ci95(vals)
        if ci is not None and not key.startswith(("snr_", "fidelity_")):
            ci = [max(ci[0], 0.0), ci[1]]  # counts and rates are never negative
        out[key] = m
        out[f"{key}_ci95"] = ci
    return out


def sweep(x, profile, cfg: ChannelConfig, ebn0_list, **kw) -> list[dict]:
    """:func:`simulate` at every Eb/N0 of ``ebn0_list`` (one encode, one row each).

    Parameters
    ----------
    x, profile, cfg
        As for :func:`simulate`.
    ebn0_list : iterable of float
        Eb/N0 values, dB.
    **kw
        Further arguments of :func:`simulate`; trial i uses seed ``seed + i``.

    Returns
    -------
    list of dict
        One report row per Eb/N0.

    Examples
    --------
    >>> import numpy as np, codec
    >>> x = np.sin(np.arange(2048) / 30.0)[:, None]
    >>> rows = sweep(x, codec.default_profile(), ChannelConfig(), [0.0, 12.0])
    >>> [r["ebn0_db"] for r in rows], rows[0]["ber_channel"] > rows[1]["ber_channel"]
    ([0.0, 12.0], True)
    """
    x = codec.as_samples(x)
    enc = codec.encode(x, profile)
    seed = kw.pop("seed", 0)
    return [simulate(x, profile, replace(cfg, ebn0_db=float(e)), seed=seed + i, enc=enc, **kw)
            for i, e in enumerate(ebn0_list)]


def measured_ber_curve(fec: str, modulation: str, ebn0_grid, bits: int, seed: int = 0,
                       interleave: int = 1, stop_at_zero: bool = False) -> dict:
    """Simulated BER of ``fec`` over AWGN at each Eb/N0 of ``ebn0_grid``.

    ``bits`` random information bits are coded once (a whole number of code
    blocks, so no padding) and sent at every grid point.  Eb is per information
    bit with every bit on air charged (parity, sync marker, tail).  With
    ``stop_at_zero`` the run ends after the first grid point (in increasing
    Eb/N0) without a decoded bit error; the arrays then cover only the points run.

    Parameters
    ----------
    fec : str
        FEC code name (:data:`FEC_NAMES`).
    modulation : {"bpsk", "qpsk"}
        The modulation.
    ebn0_grid : array_like
        Eb/N0 values, dB.
    bits : int
        Information bits sent at each point.
    seed : int
        Seed of the random generator.
    interleave : int
        RS interleaving depth.
    stop_at_zero : bool
        Stop after the first point without a decoded error.

    Returns
    -------
    dict of ndarray
        ``ebn0_db``, ``ber_channel``, ``ber_post_fec``, ``errors_post_fec``,
        ``bits_info``, ``rate_on_air``.

    Examples
    --------
    Uncoded BPSK at 4 dB: the measured BER lies within four standard errors of
    Q(sqrt(2 Eb/N0)) (Proakis 4.3):

    >>> import numpy as np
    >>> c = measured_ber_curve("none", "bpsk", [4.0], 10**6)
    >>> p = float(ber_theory("bpsk", 4.0))
    >>> bool(abs(c["ber_post_fec"][0] - p) < 4 * np.sqrt(p / 1e6))
    True
    """
    code = make_code(fec, interleave)
    unit = {"rs255": 223 * interleave, "conv": 256}.get(fec, 1)
    nbytes = max(unit, (bits // 8) // unit * unit)
    rng = np.random.default_rng(seed)
    data = rng.integers(0, 256, nbytes, dtype=np.uint8)
    air = code.encode(data)
    rate = 8.0 * nbytes / air.size
    grid = np.asarray(ebn0_grid, dtype=np.float64)
    ch = np.zeros(grid.size)
    post = np.zeros(grid.size, np.int64)
    for i, e in enumerate(grid):
        received = awgn(air, float(e), rng, modulation, rate=rate, soft=code.soft)
        ch[i] = np.count_nonzero(_hard(received) != air) / air.size
        out, _ = code.decode(received, nbytes)
        post[i] = _bit_errors(out, data)
        if stop_at_zero and post[i] == 0:
            grid, ch, post = grid[: i + 1], ch[: i + 1], post[: i + 1]
            break
    return {"ebn0_db": grid, "ber_channel": ch, "ber_post_fec": post / (8.0 * nbytes),
            "errors_post_fec": post, "bits_info": np.full(grid.size, 8 * nbytes),
            "rate_on_air": np.full(grid.size, rate)}


def zero_error_bound(trials_counted) -> np.ndarray:
    """One-sided 95 % upper bound on a rate when ``n`` trials saw no event: 1 - 0.05^(1/n).

    This is the exact (Clopper-Pearson) bound for zero events; for large ``n``
    it is the "rule of three", about 3 / n (Hanley & Lippman-Hand, JAMA 249, 1983).
    """
    n = np.asarray(trials_counted, dtype=np.float64)
    return -np.expm1(np.log(0.05) / n)


@dataclass(frozen=True)
class SweepSeries:
    """What the sweep plot draws, on one Eb/N0 axis (per codec bit, as in the tables).

    Each measured array has NaN where nothing was measured; where the measured
    value is zero the ``*_bound`` array holds the 95 % upper bound instead
    (:func:`zero_error_bound` over all bits or frames of all trials) and the
    measured array holds NaN, so a log axis never drops the point silently.
    """

    ebn0_db: np.ndarray
    x_range: tuple[float, float]
    theory_x_db: np.ndarray
    theory_channel: np.ndarray
    theory_uncoded: np.ndarray
    code_rate: float
    ber_channel: np.ndarray
    ber_channel_bound: np.ndarray
    ber_post_fec: np.ndarray
    ber_post_fec_bound: np.ndarray
    frame_error_rate: np.ndarray
    frame_error_rate_bound: np.ndarray
    frame_error_rate_theory: np.ndarray | None
    snr_db_end_to_end: np.ndarray


def _split(values, counted) -> tuple[np.ndarray, np.ndarray]:
    v = np.array([np.nan if x is None else x for x in values], dtype=np.float64)
    zero = v == 0
    bound = np.where(zero, zero_error_bound(np.maximum(counted, 1)), np.nan)
    return np.where(zero, np.nan, v), bound


def sweep_series(rows: list[dict]) -> SweepSeries:
    """The curves of an AWGN sweep (rows of :func:`sweep`), all against Eb/N0 per codec bit.

    The channel's theory curve is drawn where the channel bits are: each
    carries Ec = Eb R of energy (R = codec bits / bits on air), so its BER is
    Q(sqrt(2 Ec/N0)) at Ec/N0 = Eb/N0 + 10 log10 R (Proakis, Digital
    Communications, 4.3); the uncoded curve Q(sqrt(2 Eb/N0)) is what the codec
    bits would see with no FEC at the same Eb/N0.
    """
    e = np.array([r["ebn0_db"] for r in rows], dtype=np.float64)
    lo, hi = float(e.min()) - 0.5, float(e.max()) + 0.5
    fine = np.linspace(lo, hi, 200)
    mod = rows[0]["modulation"] or "bpsk"
    rate = rows[0]["bits_codec"] / rows[0]["bits_on_air"]
    trials = np.array([r["trials"] for r in rows], dtype=np.float64)
    air = np.array([r["bits_on_air"] for r in rows], dtype=np.float64) * trials
    info = np.array([r["bits_codec"] for r in rows], dtype=np.float64) * trials
    frames = np.array([r["frames_sent"] for r in rows], dtype=np.float64) * trials
    ch, ch_b = _split([r["ber_channel"] for r in rows], air)
    post, post_b = _split([r["ber_post_fec"] for r in rows], info)
    fer, fer_b = _split([r["frame_error_rate"] for r in rows], frames)
    fer_t = (np.array([r["frame_error_rate_theory"] for r in rows], dtype=np.float64)
             if "frame_error_rate_theory" in rows[0] else None)
    snr = np.array([np.nan if r["snr_db_end_to_end"] is None else r["snr_db_end_to_end"]
                    for r in rows], dtype=np.float64)
    return SweepSeries(e, (lo, hi), fine, ber_theory(mod, fine + 10 * math.log10(rate)),
                       ber_theory(mod, fine), rate, ch, ch_b, post, post_b, fer, fer_b, fer_t,
                       snr)


def plot_sweep(rows: list[dict], path: str | Path, label: str = "") -> None:
    """Draw an AWGN sweep: BER, frame error rate and end-to-end SNR on one shared Eb/N0 axis."""
    import matplotlib.pyplot as plt

    from codec import atomic_output

    fig = sweep_figure(rows, label)
    with atomic_output(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110)
    plt.close(fig)


def sweep_figure(rows: list[dict], label: str = ""):
    """The matplotlib figure of :func:`plot_sweep` (three panels, one shared x range)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    s = sweep_series(rows)
    mod = (rows[0]["modulation"] or "bpsk").upper()
    fig, ax = plt.subplots(1, 3, figsize=(14, 5.6), sharex=True)
    bound_style = dict(ls="none", marker="v", mfc="none")
    ax[0].semilogy(s.theory_x_db, s.theory_channel, "k--",
                   label=f"theory, channel bits ({mod}, code rate {s.code_rate:.3f})")
    if abs(s.code_rate - 1.0) > 1e-9:
        ax[0].semilogy(s.theory_x_db, s.theory_uncoded, "k:",
                       label=f"theory, uncoded {mod} at this Eb/N0")
    line = ax[0].semilogy(s.ebn0_db, s.ber_channel, "o-", label="channel (measured)")[0]
    ax[0].semilogy(s.ebn0_db, s.ber_channel_bound, color=line.get_color(), **bound_style,
                   label="channel: no error, 95 % upper bound")
    line = ax[0].semilogy(s.ebn0_db, s.ber_post_fec, "s-",
                          label=f"after FEC ({rows[0]['fec']}, measured)")[0]
    ax[0].semilogy(s.ebn0_db, s.ber_post_fec_bound, color=line.get_color(), **bound_style,
                   label="after FEC: no error, 95 % upper bound")
    ax[0].set_ylabel("bit error rate")
    line = ax[1].semilogy(s.ebn0_db, s.frame_error_rate, "o-", label="measured")[0]
    ax[1].semilogy(s.ebn0_db, s.frame_error_rate_bound, color=line.get_color(), **bound_style,
                   label="no frame lost, 95 % upper bound")
    if s.frame_error_rate_theory is not None:
        ax[1].semilogy(s.ebn0_db, s.frame_error_rate_theory, "k--", label="theory, uncoded")
    ax[1].set_ylabel("frame error rate")
    ax[2].plot(s.ebn0_db, s.snr_db_end_to_end, "o-", label="end to end")
    ax[2].axhline(rows[0]["snr_db_codec_only"] or np.nan, color="k", ls=":",
                  label="codec alone")
    ax[2].set_ylabel("SNR over all channels, pooled (dB)")
    for a in ax:
        a.set_xlabel("Eb/N0 per codec bit (dB)")
        a.grid(True, which="both", alpha=0.3)
        a.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.15))
    ax[0].set_xlim(*s.x_range)  # shared by all three panels
    fig.suptitle(f"{label + ': ' if label else ''}{mod} over AWGN, FEC {rows[0]['fec']}, "
                 f"{rows[0]['bits_on_air_per_sample']:.2f} bits on air per sample; "
                 "triangles: no error seen, drawn at the 95 % upper bound (rule of three)")
    fig.tight_layout()
    return fig
