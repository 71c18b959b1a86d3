"""The link budget as a table an engineer can audit line by line.

Each :class:`BudgetLine` carries the item, its value, its unit and the formula
or source it came from.  The chain is the textbook one:

    L_fs   = 20 log10(4 pi d / lambda)                      (ITU-R P.525)
    EIRP   = 10 log10(P_t / 1 W) + G_t
    P_r    = EIRP - L_fs - sum(losses) + G_r
    T_sys  = T_ant + T0 (10^(NF/10) - 1),  T0 = 290 K       (IEEE noise figure)
    C/N0   = EIRP - L_fs - sum(losses) + G/T - 10 log10(k)  (k from SI 2019)
    Eb/N0  = C/N0 - 10 log10(R)
    margin = Eb/N0 - required Eb/N0(modulation, FEC, target BER)
    R_max  = 10^((C/N0 - required Eb/N0 - required margin) / 10)

A stream fits the radio (:func:`judge_stream`) only when (a) its bits on air
per second (codec bits / code rate + the radio's packet overhead per frame)
are at most the radio's configured rate on air, (b) the margin at the radio's
configured rate keeps the required margin, and for an orbit (c) the bits on
air produced in one orbital period fit in what the passes of one period carry.
``R_max`` is what the link would allow if the radio were set to it; it does
not make a stream fit a radio configured slower.

``R`` is the information bit rate (the codec's bits, before FEC) and every
Eb/N0 is per information bit, so a code's rate penalty is inside its measured
curve; the on-air channel bit rate ``R / code rate`` is listed beside it.  The
signal losses of ``[losses_db]`` are treated as losses of signal only (they do
not add noise); put lossy feed-line noise into the system noise temperature.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.optimize import brentq

from codec import ProfileError

from ._fec import make_code
from ._linkfile import SPEED_OF_LIGHT_M_S, LinkFile
from ._orbit import (
    EARTH_RADIUS_M,
    central_angle_rad,
    orbital_period_s,
    pass_duration_s,
    slant_range_m,
)
from ._theory import ber_theory

__all__ = [
    "BOLTZMANN_J_K",
    "T0_K",
    "BudgetLine",
    "Budget",
    "fspl_db",
    "noise_temperature_k",
    "compute_budget",
    "pass_summary",
    "FIT_LIMITS",
    "StreamFit",
    "judge_stream",
    "SECONDS_PER_DAY",
    "PASS_ELEVATIONS_DEG",
    "RequiredEbN0",
    "required_ebn0",
    "code_rate",
    "CURVES_PATH",
]

#: Boltzmann constant, exact since the 2019 SI redefinition.
BOLTZMANN_J_K = 1.380649e-23
#: Reference temperature of the noise figure (IEEE definition).
T0_K = 290.0
#: Seconds in a (mean solar) day, for passes_per_day.
SECONDS_PER_DAY = 86_400.0
#: The conditions a stream must meet to fit, in the order they are checked.
FIT_LIMITS = ("rate", "margin", "pass_volume")
#: Elevations listed in the pass table (those at or above the minimum elevation).
PASS_ELEVATIONS_DEG = (0.0, 5.0, 10.0, 15.0, 20.0, 30.0, 45.0, 60.0, 75.0, 90.0)


#: Measured coded BER curves written by ``tools/make_fec_curves.py`` (link simulator).
CURVES_PATH = Path(__file__).with_name("data") / "fec_curves.json"
#: Fewest post-FEC bit errors a curve point needs before we interpolate through it.
_MIN_ERRORS = 10


def code_rate(fec: str) -> float:
    """Nominal information bits per channel bit of ``fec`` (the simulator's code).

    A measured curve's own rate on air (sync markers and padding counted) takes
    precedence over this in the budget.
    """
    return float(make_code(fec).rate)


@dataclass(frozen=True)
class RequiredEbN0:
    """Eb/N0 per information bit needed for a target BER, and where the number came from.

    ``code_rate`` is the information bits per bit on air that the number assumes.
    """

    ebn0_db: float
    source: str
    code_rate: float = 1.0
    rate_source: str = "uncoded"


def required_ebn0(modulation: str, fec: str, target_ber: float,
                  curves_path: str | Path | None = None) -> RequiredEbN0:
    """Eb/N0 (dB, per information bit) at which ``modulation`` + ``fec`` reach ``target_ber``.

    Uncoded: the closed-form BER Q(sqrt(2 Eb/N0)) (BPSK; Gray QPSK per bit is
    the same) inverted numerically with Brent's method.  Coded: the link
    simulator's measured curve, interpolated linearly in log10(BER) against
    Eb/N0 in dB between neighbouring points that each saw at least ten bit
    errors; a target outside what the simulation measured is refused, never
    extrapolated.

    Raises
    ------
    codec.ProfileError
        When no measured curve exists for ``fec`` or the target is outside it.

    References
    ----------
    .. [1] J. G. Proakis, M. Salehi, *Digital Communications*, 5th ed., 2008, sec. 4.3.
    .. [2] R. P. Brent, *Algorithms for Minimization without Derivatives*, 1973, ch. 4.
    """
    if fec == "none":
        def excess(x):
            return math.log10(float(ber_theory(modulation, x))) - math.log10(target_ber)
        value = brentq(excess, -10.0, 25.0, xtol=1e-10)  # BER 0.33 .. 1e-138
        name = "BPSK" if modulation == "bpsk" else "Gray QPSK"
        return RequiredEbN0(value, f"{name} uncoded: BER = Q(sqrt(2 Eb/N0)) = {target_ber:g} "
                            "solved by Brent's method (Proakis 4.3)")
    return _required_from_curve(modulation, fec, target_ber,
                                Path(curves_path) if curves_path else CURVES_PATH)


def _load_curves(path: Path, fec: str) -> dict:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ProfileError(
            f"no measured BER curve for fec = '{fec}' ({path} is missing); the required Eb/N0 "
            "of a coded link comes only from the link simulator's curves, so make them with "
            "tools/make_fec_curves.py or use fec = 'none'", "fec") from None
    except (OSError, ValueError) as exc:
        raise ProfileError(f"the measured BER curves cannot be read ({exc}); remake them with "
                           "tools/make_fec_curves.py", str(path)) from None


def _required_from_curve(modulation, fec, target_ber, path: Path) -> RequiredEbN0:
    doc = _load_curves(path, fec)
    curve = doc.get("curves", {}).get(fec)
    if curve is None:
        raise ProfileError(f"the measured curves have no entry for fec = '{fec}'; remake them "
                           "with tools/make_fec_curves.py", str(path))
    prov = doc.get("provenance", {})
    min_err = int(prov.get("min_errors_for_interpolation", _MIN_ERRORS))
    x = np.asarray(curve["ebn0_db"], float)
    ber = np.asarray(curve["ber_post_fec"], float)
    errors = np.asarray(curve["errors_post_fec"], float)
    bits = curve.get("bits_info_per_point", prov.get("bits_info_per_point"))
    ok = (errors >= min_err) & (ber > 0)
    measured = f"{fec}, {str(curve.get('modulation', '?')).upper()} over AWGN"
    if modulation != curve.get("modulation", modulation):
        # Gray QPSK has the per-bit BER of BPSK over AWGN (Proakis 4.3), so the curve serves.
        measured += f", used for Gray {modulation.upper()} (same BER per bit)"
    if "ber_post_fec_upper95" in curve:
        # Curves with event counts: read the 95 % upper bound of each point (an exact Poisson
        # limit on the error events, Garwood 1936, see tools/make_fec_curves.py), made
        # non-increasing in Eb/N0, so the requirement is conservative and a noisy point can
        # never make a higher Eb/N0 look worse than a lower one.
        upper = np.asarray(curve["ber_post_fec_upper95"], float)
        upper = np.maximum.accumulate(upper[::-1])[::-1]
        events = np.asarray(curve.get("events", errors), int)
        rate = float(curve.get("rate_on_air") or code_rate(fec))
        rate_source = ("rate on air recorded with the measured curve (every bit on air counted)"
                       if curve.get("rate_on_air") else "nominal code rate")
        made = ", ".join(f"{k} {str(prov[k]).strip()}" for k in ("command", "seed", "date_utc",
                                                      "coefwire_version") if k in prov)
        lt = math.log10(target_ber)
        for i in range(x.size - 1):
            if upper[i] >= target_ber >= upper[i + 1] > 0:
                a, b = math.log10(upper[i]), math.log10(upper[i + 1])
                value = float(x[i] if a == b else x[i] + (lt - a) / (b - a) * (x[i + 1] - x[i]))
                break
        else:
            where = ("below the lowest 95 % upper bound measured"
                     if target_ber < upper[-1] else "not bracketed by the measured points")
            raise ProfileError(
                f"target_ber {target_ber:g} is {where} for fec = '{fec}' ({upper[-1]:.3g} at "
                f"{x[-1]:g} dB after {events[-1]} error events); the budget does not "
                "extrapolate: raise target_ber or remake the curves with a higher bit limit",
                str(path))
        source = (f"95 % upper bound of the measured post-FEC BER curve ({measured}; "
                  f"{events[i]} and {events[i + 1]} error events at the two points; {made}) "
                  f"interpolated in log10 BER between {x[i]:g} and {x[i + 1]:g} dB at BER "
                  f"{target_ber:g}; file {path.name}")
        return RequiredEbN0(value, source, rate, rate_source)
    if not ok.any():
        raise ProfileError(f"the measured curve for fec = '{fec}' has no point with at least "
                           f"{min_err} bit errors; remake it with more bits", str(path))
    trusted = np.flatnonzero(ok)
    lowest = trusted[np.argmin(ber[trusted])]
    rate = float(curve.get("rate_on_air") or code_rate(fec))
    rate_source = ("rate on air recorded with the measured curve (every bit on air counted)"
                   if curve.get("rate_on_air") else "nominal code rate")
    made = ", ".join(f"{k} {str(prov[k]).strip()}" for k in ("command", "seed", "date_utc",
                                                  "coefwire_version") if k in prov)
    floor = curve.get("below_floor_at_db")
    if target_ber < ber[lowest] and floor is not None and bits and 3.0 / bits <= target_ber:
        # No error at all in `bits` trials: the one-sided 95 % upper bound on the BER is
        # about 3 / bits (the "rule of three": Hanley & Lippman-Hand, JAMA 249, 1983).  If
        # that bound is already below the target, the floor point's Eb/N0 is enough: a
        # conservative requirement, measured rather than extrapolated.
        source = (f"conservative bound from the measured curve ({measured}; {made}): no bit "
                  f"error in {bits} information bits at {floor:g} dB, so BER < 3/{bits} = "
                  f"{3.0 / bits:.2g} there (rule of three, 95 %), below the target "
                  f"{target_ber:g}; the true requirement lies between {x[lowest]:g} and "
                  f"{floor:g} dB; file {path.name}")
        return RequiredEbN0(float(floor), source, rate, rate_source)
    if target_ber < ber[lowest]:
        bound = (f"; from {floor:g} dB no error at all was seen in {bits} bits, so there the "
                 f"BER is only known to be below about 1/{bits}" if floor is not None and bits
                 else "")
        raise ProfileError(
            f"target_ber {target_ber:g} is below the lowest BER the simulator measured for "
            f"fec = '{fec}' with at least {min_err} errors ({ber[lowest]:.3g} at "
            f"{x[lowest]:g} dB){bound}; the budget does not extrapolate: raise target_ber or "
            "remake the curves with more bits", str(path))
    # First crossing between neighbouring trusted points, in log10(BER).
    lt = math.log10(target_ber)
    for i in range(x.size - 1):
        if ok[i] and ok[i + 1] and ber[i] >= target_ber >= ber[i + 1]:
            a, b = math.log10(ber[i]), math.log10(ber[i + 1])
            value = float(x[i] if a == b else x[i] + (lt - a) / (b - a) * (x[i + 1] - x[i]))
            break
    else:
        raise ProfileError(
            f"target_ber {target_ber:g} is not bracketed by two measured points of the "
            f"fec = '{fec}' curve ({x[0]:g} to {x[-1]:g} dB); the budget does not extrapolate: "
            "remake the curves over a wider Eb/N0 range", str(path))
    source = (f"measured post-FEC BER curve ({measured}, {bits} information bits per point; "
              f"{made}) interpolated in log10 BER between {x[i]:g} and {x[i + 1]:g} dB "
              f"at BER {target_ber:g}; file {path.name}")
    return RequiredEbN0(value, source, rate, rate_source)


def fspl_db(distance_m, frequency_hz):
    """Free-space path loss 20 log10(4 pi d f / c) in dB (ITU-R P.525, isotropic antennas)."""
    d = np.asarray(distance_m, float)
    return 20.0 * np.log10(4.0 * np.pi * d * frequency_hz / SPEED_OF_LIGHT_M_S)


def noise_temperature_k(noise_figure_db: float, t0_k: float = T0_K) -> float:
    """Equivalent input noise temperature of a receiver, T0 (10^(NF/10) - 1) (IEEE)."""
    return t0_k * (10.0 ** (noise_figure_db / 10.0) - 1.0)


@dataclass(frozen=True)
class BudgetLine:
    """One auditable line: item, value, unit, and the formula or source behind it."""

    item: str
    value: float
    unit: str
    source: str

    def as_dict(self) -> dict:
        return {"item": self.item, "value": self.value, "unit": self.unit,
                "source": self.source}


@dataclass
class Budget:
    """A computed link budget at one distance (the worst case of a pass for an orbit)."""

    link: LinkFile
    distance_m: float
    lines: list[BudgetLine]
    figures: dict
    required: RequiredEbN0
    cn0_dbhz: float

    def ebn0_db(self, rate_bps):
        """Eb/N0 per information bit at information rate ``rate_bps``."""
        return self.cn0_dbhz - 10.0 * np.log10(np.asarray(rate_bps, float))

    def margin_db(self, rate_bps):
        """Margin over the required Eb/N0 at ``rate_bps``."""
        return self.ebn0_db(rate_bps) - self.required.ebn0_db

    def fits(self, rate_bps):
        """Whether ``rate_bps`` keeps at least the required margin."""
        return self.margin_db(rate_bps) >= self.link.required_margin_db


def _distance(link: LinkFile) -> tuple[float, str]:
    if link.distance_m is not None:
        return link.distance_m, "link file"
    o = link.orbit
    d = float(slant_range_m(o.min_elevation_deg, o.altitude_m, o.station_altitude_m))
    return d, (f"slant range at the minimum elevation {o.min_elevation_deg:g} deg from a "
               f"{o.altitude_m / 1e3:g} km circular orbit (spherical Earth, "
               f"R_E = {EARTH_RADIUS_M / 1e3:g} km): worst case of the pass")


def compute_budget(link: LinkFile, distance_m: float | None = None, curves_path=None) -> Budget:
    """Budget of ``link`` at ``distance_m`` (default: the link's distance or worst pass range).

    Raises :class:`codec.ProfileError` when the required Eb/N0 cannot be found
    (no measured curve for the FEC, or a target BER beyond what it measured).
    """
    if distance_m is None:
        distance, dist_src = _distance(link)
    else:
        distance, dist_src = float(distance_m), "given"
    lam = SPEED_OF_LIGHT_M_S / link.frequency_hz
    fspl = float(fspl_db(distance, link.frequency_hz))
    ptx_dbw = 10.0 * math.log10(link.tx_power_w)
    eirp = ptx_dbw + link.tx_antenna_gain_dbi
    losses = sum(link.losses_db.values())
    prx = eirp - fspl - losses + link.rx_antenna_gain_dbi
    k_db = 10.0 * math.log10(BOLTZMANN_J_K)
    req = required_ebn0(link.modulation, link.fec, link.target_ber, curves_path)
    rate = req.code_rate

    L = BudgetLine
    lines = [
        L("frequency", link.frequency_hz, "Hz", "link file"),
        L("wavelength", lam, "m", "lambda = c / f, c = 299 792 458 m/s (SI)"),
        L("distance", distance, "m", dist_src),
        L("free-space path loss", fspl, "dB", "20 log10(4 pi d / lambda) (ITU-R P.525)"),
        L("transmit power", ptx_dbw, "dBW", f"10 log10(P / 1 W), P = {link.tx_power_w:g} W"),
        L("transmit antenna gain", link.tx_antenna_gain_dbi, "dBi", "link file"),
        L("EIRP", eirp, "dBW", "transmit power + transmit antenna gain"),
    ]
    lines += [L(f"loss: {name}", value, "dB", "link file") for name, value in
              link.losses_db.items()]
    lines += [
        L("other losses, total", losses, "dB", "sum of [losses_db]"),
        L("receive antenna gain", link.rx_antenna_gain_dbi, "dBi", "link file"),
        L("received power", prx, "dBW",
          "EIRP - path loss - other losses + receive antenna gain"),
    ]
    if link.system_noise_temperature_k is not None:
        t_sys = link.system_noise_temperature_k
        lines.append(L("system noise temperature", t_sys, "K", "link file"))
    else:
        t_rx = noise_temperature_k(link.noise_figure_db)
        t_sys = link.antenna_temperature_k + t_rx
        lines += [
            L("receiver noise figure", link.noise_figure_db, "dB", "link file"),
            L("receiver noise temperature", t_rx, "K",
              "T0 (10^(NF/10) - 1), T0 = 290 K (IEEE definition of noise figure)"),
            L("antenna noise temperature", link.antenna_temperature_k, "K", "link file"),
            L("system noise temperature", t_sys, "K", "antenna + receiver noise temperature"),
        ]
    g_over_t = link.rx_antenna_gain_dbi - 10.0 * math.log10(t_sys)
    cn0 = eirp - fspl - losses + g_over_t - k_db
    ebn0 = cn0 - 10.0 * math.log10(link.data_rate_bps)
    margin = ebn0 - req.ebn0_db
    r_max = 10.0 ** ((cn0 - req.ebn0_db - link.required_margin_db) / 10.0)
    lines += [
        L("G/T", g_over_t, "dB/K", "receive antenna gain - 10 log10(T_sys)"),
        L("Boltzmann constant", k_db, "dBW/(K Hz)", "10 log10(k), k = 1.380649e-23 J/K (SI 2019)"),
        L("C/N0", cn0, "dB-Hz", "EIRP - path loss - other losses + G/T - 10 log10(k)"),
        L("data rate (information)", link.data_rate_bps, "bit/s", "link file, before FEC"),
        L("Eb/N0", ebn0, "dB", "C/N0 - 10 log10(R), per information bit"),
        L("FEC code rate", rate, "-", f"fec = {link.fec}: {req.rate_source}"),
        L("channel bit rate on air", link.data_rate_bps / rate, "bit/s", "R / code rate"),
        L("Ec/N0 per channel bit", ebn0 + 10.0 * math.log10(rate), "dB",
          "Eb/N0 + 10 log10(code rate)"),
        L("required Eb/N0", req.ebn0_db, "dB", req.source),
        L("margin", margin, "dB", "Eb/N0 - required Eb/N0"),
        L("required margin", link.required_margin_db, "dB", "link file"),
        L("maximum data rate", r_max, "bit/s",
          "10^((C/N0 - required Eb/N0 - required margin) / 10)"),
    ]
    figures = {
        "distance_m": distance,
        "fspl_db": fspl,
        "eirp_dbw": eirp,
        "received_power_dbw": prx,
        "system_noise_temperature_k": t_sys,
        "g_over_t_db_k": g_over_t,
        "cn0_dbhz": cn0,
        "data_rate_bps": link.data_rate_bps,
        "ebn0_db": ebn0,
        "code_rate": rate,
        "channel_bit_rate_bps": link.data_rate_bps / rate,
        "required_ebn0_db": req.ebn0_db,
        "required_ebn0_source": req.source,
        "margin_db": margin,
        "required_margin_db": link.required_margin_db,
        "fits": bool(margin >= link.required_margin_db),
        "max_data_rate_bps": r_max,
    }
    return Budget(link, distance, lines, figures, req, cn0)


def _elevation_at_range(distance_m, altitude_m, station_altitude_m):
    """Elevation at which the slant range equals ``distance_m`` (inverse of slant_range_m).

    Law of cosines in the same triangle: r^2 = r_s^2 + d^2 + 2 r_s d sin e.
    """
    r = EARTH_RADIUS_M + altitude_m
    r_s = EARTH_RADIUS_M + station_altitude_m
    s = (r * r - r_s * r_s - distance_m**2) / (2.0 * r_s * distance_m)
    return math.degrees(math.asin(min(1.0, max(-1.0, s))))


def pass_summary(budget: Budget, rate_bps: float | None = None,
                 bits_per_frame: float | None = None) -> dict | None:
    """Margin across an overhead pass and the data one pass carries at ``rate_bps``.

    Returns None for a fixed-distance link.  Besides the pass table it gives
    ``passes_per_day`` (the link file's, else one overhead pass per orbit: a
    best case), the bits one pass carries on air and the pass-averaged rate
    (information and on air): what the passes of one orbital period carry,
    divided by the period.  The pass table lists elevation,
    slant range, path loss, Eb/N0 and margin; the usable time is the part of
    the pass above the minimum elevation where the margin is at least the
    required margin (an overhead pass has its worst margin at the lowest
    elevation, so it is one span around the culmination).
    """
    link = budget.link
    o = link.orbit
    if o is None:
        return None
    rate = link.data_rate_bps if rate_bps is None else float(rate_bps)
    elev = np.array(sorted({*(e for e in PASS_ELEVATIONS_DEG if e >= o.min_elevation_deg),
                            o.min_elevation_deg}))
    d = slant_range_m(elev, o.altitude_m, o.station_altitude_m)
    loss = fspl_db(d, link.frequency_hz)
    shift = budget.figures["fspl_db"] - loss  # better than at the budget's distance by this
    ebn0 = budget.ebn0_db(rate) + shift
    margin = ebn0 - budget.required.ebn0_db
    period = float(orbital_period_s(o.altitude_m))
    from_zenith = central_angle_rad(elev, o.altitude_m, o.station_altitude_m) / (2 * np.pi) * period
    duration = float(pass_duration_s(o.altitude_m, o.min_elevation_deg, o.station_altitude_m))

    # Usable span: where margin(e) >= required margin, e >= e_min.  The margin
    # grows as the range shrinks, by 20 log10(d_min / d), so solve for that range.
    worst = float(margin[0])  # the table starts at the minimum elevation
    need = link.required_margin_db - worst  # dB of path loss still to gain
    if need <= 0:
        usable_el, usable = o.min_elevation_deg, duration
    else:
        d_need = float(d[0]) * 10.0 ** (-need / 20.0)
        zenith = float(slant_range_m(90.0, o.altitude_m, o.station_altitude_m))
        if d_need < zenith:
            usable_el, usable = None, 0.0
        else:
            usable_el = _elevation_at_range(d_need, o.altitude_m, o.station_altitude_m)
            usable = float(pass_duration_s(o.altitude_m, usable_el, o.station_altitude_m))
    volume = rate * usable
    rows = [
        {"elevation_deg": float(e), "slant_range_m": float(r), "fspl_db": float(f),
         "ebn0_db": float(b), "margin_db": float(m), "time_from_culmination_s": float(t)}
        for e, r, f, b, m, t in zip(elev, d, loss, ebn0, margin, from_zenith)
    ]
    out = {
        **_pass_capacity(link, period, usable, rate, budget.figures["code_rate"]),
        "orbital_period_s": period,
        "pass_duration_s": duration,
        "min_elevation_deg": o.min_elevation_deg,
        "rate_bps": rate,
        "usable_from_elevation_deg": usable_el,
        "usable_duration_s": usable,
        "data_volume_bits": volume,
        "data_volume_bytes": volume / 8.0,
        "table": rows,
    }
    if bits_per_frame:
        out["bits_per_frame"] = float(bits_per_frame)
        out["frames_per_pass"] = int(volume // bits_per_frame)
    return out


def _pass_capacity(link: LinkFile, period: float, usable: float, rate: float,
                   code: float) -> dict:
    """What the passes of one orbital period carry (every pass counted as overhead)."""
    o = link.orbit
    if o.passes_per_day is not None:
        per_day = float(o.passes_per_day)
        source = "link file"
    else:
        per_day = SECONDS_PER_DAY / period
        source = ("best case of one pass per orbit; a real station sees fewer: set "
                  "passes_per_day in the link file where you know it")
    per_orbit = per_day * period / SECONDS_PER_DAY
    return {
        "passes_per_day": per_day,
        "passes_per_day_source": source,
        "passes_per_orbit": per_orbit,
        "data_volume_on_air_bits": rate / code * usable,
        "pass_averaged_rate_bps": rate * usable * per_orbit / period,
        "pass_averaged_on_air_bps": rate / code * usable * per_orbit / period,
        "best_case_note": (
            "every pass is counted as an overhead pass through the zenith, the longest pass "
            "(Earth rotation ignored): a best case; lower passes are shorter"),
    }


@dataclass(frozen=True)
class StreamFit:
    """Whether a stream of a given bit rate fits the radio, and which condition fails.

    All rates are bits per second.  ``on_air_bps`` is what the stream puts on
    air (codec bits / code rate + packet overhead per frame); ``radio_on_air_bps``
    is the radio's configured rate on air.  For an orbit ``orbit_bits_on_air``
    is what the stream produces in one orbital period and ``pass_bits_on_air``
    what the passes of one period carry at the radio's rate.
    """

    bits_per_second: float
    frames_per_second: float
    on_air_bps: float
    radio_on_air_bps: float
    margin_db: float
    required_margin_db: float
    orbit_bits_on_air: float | None
    pass_bits_on_air: float | None
    failed: tuple[str, ...]

    @property
    def fits(self) -> bool:
        return not self.failed

    @property
    def limited_by(self) -> str | None:
        """The first failing condition of :data:`FIT_LIMITS`, or None when it fits."""
        return self.failed[0] if self.failed else None

    @property
    def spare_on_air_bps(self) -> float:
        """Radio rate left over on air (negative: the stream needs more than the radio)."""
        return self.radio_on_air_bps - self.on_air_bps

    @property
    def spare_percent(self) -> float:
        return 100.0 * self.spare_on_air_bps / self.radio_on_air_bps

    def as_dict(self) -> dict:
        out = {
            "fits": self.fits,
            "limited_by": self.limited_by,
            "failed_conditions": list(self.failed),
            "channel_bits_per_second": self.on_air_bps,
            "frames_per_second": self.frames_per_second,
            "radio_on_air_bps": self.radio_on_air_bps,
            "spare_on_air_bps": self.spare_on_air_bps,
            "spare_percent": self.spare_percent,
            "margin_db": self.margin_db,
        }
        if self.orbit_bits_on_air is not None:
            out["orbit_bits_on_air"] = self.orbit_bits_on_air
            out["pass_bits_on_air"] = self.pass_bits_on_air
            out["pass_volume_used_percent"] = (
                100.0 * self.orbit_bits_on_air / self.pass_bits_on_air
                if self.pass_bits_on_air else None)
        return out


def judge_stream(budget: Budget, bits_per_second: float, frames_per_second: float = 0.0,
                 passing: dict | None = None) -> StreamFit:
    """Check a stream of ``bits_per_second`` codec bits against the radio of ``budget``.

    Conditions, in the order of :data:`FIT_LIMITS`:

    * ``rate``: bits on air per second (``bits_per_second`` / code rate +
      ``frames_per_second`` x the link's ``packet_overhead_bits``) at most the
      radio's configured rate on air (``data_rate_bps`` / code rate);
    * ``margin``: the margin at the radio's configured rate (at the budget's
      distance: the worst range of a pass) keeps ``required_margin_db``;
    * ``pass_volume`` (orbits only): the bits on air produced in one orbital
      period fit in what the passes of one period carry at the radio's rate,
      during the part of each pass that keeps the required margin.  Without
      ``passes_per_day`` one overhead pass per orbit is assumed: a best case.

    ``passing`` is :func:`pass_summary` of the budget (computed when omitted).
    """
    link = budget.link
    code = budget.figures["code_rate"]
    bps = float(bits_per_second)
    fps = float(frames_per_second)
    on_air = bps / code + fps * link.packet_overhead_bits
    radio = link.data_rate_bps / code
    margin = float(budget.figures["margin_db"])
    failed = []
    if on_air > radio:
        failed.append("rate")
    if margin < link.required_margin_db:
        failed.append("margin")
    orbit_bits = pass_bits = None
    if link.orbit is not None:
        passing = passing if passing is not None else pass_summary(budget)
        orbit_bits = on_air * passing["orbital_period_s"]
        pass_bits = passing["pass_averaged_on_air_bps"] * passing["orbital_period_s"]
        if orbit_bits > pass_bits:
            failed.append("pass_volume")
    return StreamFit(bps, fps, on_air, radio, margin, link.required_margin_db, orbit_bits,
                     pass_bits, tuple(failed))
