"""The link description file: one radio link, written by hand in TOML.

Every key carries its unit in its name.  Unknown keys and impossible values
are refused with the file, the key and the allowed range named, as a
:class:`codec.ProfileError`.  Example (a fixed terrestrial link)::

    description = "remote station to gateway"
    frequency_hz = 868.0e6
    distance_m = 12000.0          # or an [orbit] table, see below
    tx_power_w = 0.025
    tx_antenna_gain_dbi = 2.15
    rx_antenna_gain_dbi = 6.0
    noise_figure_db = 3.0         # with antenna_temperature_k ...
    antenna_temperature_k = 290.0 # ... or system_noise_temperature_k alone
    data_rate_bps = 1200.0        # the radio's configured rate, information bits
    packet_overhead_bits = 0.0    # bits the radio adds per codec frame (preamble, sync word)
    modulation = "bpsk"           # bpsk | qpsk (Gray-coded)
    fec = "none"                  # none | hamming74 | rs255 | conv
    target_ber = 1e-5
    required_margin_db = 6.0

    [losses_db]                   # any names, each a loss >= 0 dB
    cable = 1.0
    fade = 10.0

For a satellite in a circular orbit, replace ``distance_m`` by::

    [orbit]
    altitude_m = 550e3
    min_elevation_deg = 10.0
    station_altitude_m = 0.0
    passes_per_day = 4.0          # optional: usable passes a day at this station, if known

Without ``passes_per_day`` the budget assumes one overhead pass per orbit, the
best case; a real station sees fewer and shorter passes, so give the number
where you know it (from a pass predictor for your orbit and site).
"""

from __future__ import annotations

import difflib
from pathlib import Path
from typing import Annotated, Literal

import annotated_types as at
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from codec import ProfileError, read_toml

from ._channels import MODULATIONS
from ._fec import fec_names
from ._orbit import orbital_period_s

__all__ = ["LinkFile", "OrbitSpec", "load_link", "link_from_dict", "SPEED_OF_LIGHT_M_S",
           "MODULATIONS"]

#: Speed of light in vacuum, m/s (exact by definition of the metre, SI).
SPEED_OF_LIGHT_M_S = 299_792_458.0


_Loss = Annotated[float, Field(ge=0.0, le=300.0, allow_inf_nan=False)]


class OrbitSpec(BaseModel):
    """A circular orbit seen from one ground station (spherical Earth)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    #: Height of the circular orbit above the mean Earth radius.
    altitude_m: float = Field(ge=100e3, le=100e6, allow_inf_nan=False)
    #: Lowest elevation at which the station works (horizon mask).
    min_elevation_deg: float = Field(ge=0.0, le=89.0, allow_inf_nan=False)
    #: Station height above the mean Earth radius.
    station_altitude_m: float = Field(default=0.0, ge=-500.0, le=9000.0, allow_inf_nan=False)
    #: Usable passes a day at this station, where the user knows it (else one
    #: overhead pass per orbit, the best case).  Each pass is still counted as
    #: an overhead pass (the longest), so this is a best case per pass too.
    passes_per_day: float | None = Field(default=None, gt=0.0, le=20.0, allow_inf_nan=False)

    @model_validator(mode="after")
    def _station_below_orbit(self) -> OrbitSpec:
        if self.station_altitude_m >= self.altitude_m:
            raise ValueError("the station must be below the orbit")
        if self.passes_per_day is not None:
            orbits = 86400.0 / float(orbital_period_s(self.altitude_m))
            if self.passes_per_day > orbits + 1.0:
                # A station sees at most one pass per revolution (plus one at the day's
                # edges); more means the number was meant for another orbit or period.
                raise ValueError(f"passes_per_day {self.passes_per_day:g} is more than the "
                                 f"{orbits:.2f} revolutions a day of this orbit allow")
        return self


class LinkFile(BaseModel):
    """One link: transmitter, path, receiver and what the data needs.

    The frequency range is the ITU definition of radio waves (below 3000 GHz);
    the path loss formula needs the far field, so a distance shorter than ten
    wavelengths is refused.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    description: str = ""
    frequency_hz: float = Field(ge=3e3, le=3e12, allow_inf_nan=False)
    distance_m: float | None = Field(default=None, gt=0.0, le=1e13, allow_inf_nan=False)
    orbit: OrbitSpec | None = None
    tx_power_w: float = Field(gt=0.0, le=1e6, allow_inf_nan=False)
    tx_antenna_gain_dbi: float = Field(ge=-50.0, le=100.0, allow_inf_nan=False)
    rx_antenna_gain_dbi: float = Field(ge=-50.0, le=100.0, allow_inf_nan=False)
    losses_db: dict[str, _Loss] = Field(default_factory=dict)
    system_noise_temperature_k: float | None = Field(default=None, gt=0.0, le=1e6,
                                                     allow_inf_nan=False)
    noise_figure_db: float | None = Field(default=None, ge=0.0, le=40.0, allow_inf_nan=False)
    antenna_temperature_k: float | None = Field(default=None, ge=0.0, le=1e5,
                                                allow_inf_nan=False)
    #: The radio's configured data rate, in information bits per second (before FEC;
    #: on air it is data_rate_bps / code rate).
    data_rate_bps: float = Field(gt=0.0, le=1e12, allow_inf_nan=False)
    #: Bits the radio adds on air to every codec frame it sends as one packet
    #: (preamble, sync word, length, radio CRC); not FEC-coded.
    packet_overhead_bits: float = Field(default=0.0, ge=0.0, le=1e6, allow_inf_nan=False)
    # The link simulator's own lists, so the budget offers exactly what it simulates.
    modulation: Literal[MODULATIONS] = "bpsk"
    fec: str = "none"  # one of link_sim.fec_names(), registered codes included
    target_ber: float = Field(default=1e-5, ge=1e-12, le=0.1, allow_inf_nan=False)
    required_margin_db: float = Field(default=3.0, ge=0.0, le=60.0, allow_inf_nan=False)

    @field_validator("fec")
    @classmethod
    def _known_fec(cls, value: str) -> str:
        if value not in fec_names():
            names = ", ".join(repr(n) for n in fec_names())
            raise ValueError(f"unknown FEC code {value!r}; use one of {names}")
        return value

    @model_validator(mode="after")
    def _one_of_each(self) -> LinkFile:
        if (self.distance_m is None) == (self.orbit is None):
            raise ValueError("give either distance_m or an [orbit] table, not both and not "
                             "neither")
        has_t = self.system_noise_temperature_k is not None
        has_nf = self.noise_figure_db is not None or self.antenna_temperature_k is not None
        if has_t == has_nf:
            raise ValueError("give either system_noise_temperature_k, or noise_figure_db "
                             "with antenna_temperature_k")
        if has_nf and (self.noise_figure_db is None or self.antenna_temperature_k is None):
            raise ValueError("noise_figure_db and antenna_temperature_k go together; give both")
        if self.distance_m is not None:
            wavelength = SPEED_OF_LIGHT_M_S / self.frequency_hz
            if self.distance_m < 10 * wavelength:
                raise ValueError(
                    f"distance_m must be at least ten wavelengths ({10 * wavelength:.4g} m) "
                    "for the free-space path loss formula (far field)")
        return self


def link_from_dict(data: dict, where: str = "link file") -> LinkFile:
    """Validate a link description, naming the key and its allowed range on error."""
    for key, value in _leaves(data):
        if isinstance(value, bool):  # pydantic would read true as 1.0; a flag is never a number
            raise ProfileError(
                f"key '{key}': expected a number or a name, got {str(value).lower()}", where)
    try:
        return LinkFile.model_validate(data)
    except ValidationError as exc:
        raise ProfileError(_describe(exc), where) from None


def load_link(path: str | Path) -> LinkFile:
    """Read and validate a TOML link file; every error names the file and the key."""
    path = Path(path)
    return link_from_dict(read_toml(path, "link"), str(path))


def _leaves(data: dict, prefix: str = ""):
    for key, value in data.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            yield from _leaves(value, name + ".")
        else:
            yield name, value


def _field_range(model: type[BaseModel], name: str) -> str | None:
    """The allowed range of a field, read from its own constraints (one source of truth)."""
    info = model.model_fields.get(name)
    if info is None:
        return None
    lo = hi = None
    for m in info.metadata:
        if isinstance(m, at.Gt):
            lo = f"> {m.gt:g}"
        elif isinstance(m, at.Ge):
            lo = f">= {m.ge:g}"
        elif isinstance(m, at.Lt):
            hi = f"< {m.lt:g}"
        elif isinstance(m, at.Le):
            hi = f"<= {m.le:g}"
    if lo or hi:
        return "a number " + " and ".join(p for p in (lo, hi) if p)
    args = getattr(info.annotation, "__args__", ())
    if args and all(isinstance(a, str) for a in args):
        return "one of " + ", ".join(f"'{a}'" for a in args)
    return None


def _describe(exc: ValidationError) -> str:
    errors = exc.errors()
    # An unknown key is usually a misspelt known one, which then also shows up as
    # missing: name the unknown key first.
    err = next((e for e in errors if e["type"] == "extra_forbidden"), errors[0])
    loc = [str(p) for p in err["loc"]]
    key = ".".join(loc) or "(top level)"
    if err["type"] == "extra_forbidden":
        known = list(OrbitSpec.model_fields if loc[:1] == ["orbit"] else LinkFile.model_fields)
        close = difflib.get_close_matches(loc[-1], known, n=1)
        hint = f"did you mean '{close[0]}'?" if close else f"the known keys are: {', '.join(known)}"
        return f"unknown key '{key}'; {hint}"
    if err["type"] == "missing":
        rng = _field_range(OrbitSpec if loc[:1] == ["orbit"] else LinkFile, loc[-1])
        return f"key '{key}' is missing; add it" + (f" ({rng})" if rng else "")
    msg = err["msg"].removeprefix("Value error, ")
    if loc[:1] == ["losses_db"]:
        rng = "a loss in dB >= 0 and <= 300 (a gain belongs in the antenna gains)"
    elif loc[:1] == ["orbit"] and len(loc) > 1:
        rng = _field_range(OrbitSpec, loc[-1])
    elif loc:
        rng = _field_range(LinkFile, loc[-1])
    else:
        rng = None
    got = err.get("input")
    got_text = "" if isinstance(got, dict) or not loc else f" (got {got!r})"
    where = f"key '{key}': " if loc else ""
    allowed = f"; allowed: {rng}" if rng else ""
    return f"{where}{msg}{got_text}{allowed}"

