"""Pass geometry of a circular orbit over one ground station (spherical Earth).

The station sits at radius ``r_s = R_E + h_s`` and the satellite at
``r = R_E + h``.  For elevation ``e`` the triangle Earth centre - station -
satellite gives the slant range

    d(e) = sqrt(r**2 - (r_s cos e)**2) - r_s sin e

and the Earth central angle ``lambda(e) = arccos(r_s cos e / r) - e``.  An
overhead pass sweeps ``2 lambda(e_min)`` of the orbit, so it lasts
``lambda(e_min) / pi`` orbital periods.  The Earth's rotation is ignored (it
changes an overhead pass by a few percent at most for a low orbit); a pass that
does not cross the zenith is shorter, so the overhead pass is the best case of
duration and the minimum-elevation range the worst case of path loss.

References
----------
.. [1] Spherical-Earth slant range and central angle: plane triangle geometry
   (law of cosines) in the Earth-centre / station / satellite plane.
.. [2] Kepler's third law for the period of a circular orbit, T = 2 pi sqrt(r^3 / GM).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "EARTH_RADIUS_M",
    "EARTH_GM_M3_S2",
    "slant_range_m",
    "central_angle_rad",
    "orbital_period_s",
    "pass_duration_s",
    "PassTrack",
    "pass_track",
]

#: Mean Earth radius R1 of the Geodetic Reference System 1980 (IUGG; Moritz 2000).
EARTH_RADIUS_M = 6_371_008.8
#: Earth's gravitational parameter GM (IERS Conventions 2010 / WGS 84).
EARTH_GM_M3_S2 = 3.986004418e14


def _radii(altitude_m, station_altitude_m):
    return EARTH_RADIUS_M + np.asarray(altitude_m, float), \
        EARTH_RADIUS_M + np.asarray(station_altitude_m, float)


def slant_range_m(elevation_deg, altitude_m, station_altitude_m=0.0):
    """Distance station -> satellite at the given elevation(s), in metres.

    Parameters
    ----------
    elevation_deg : float or array
        Elevation of the satellite above the station's horizon, 0..90 degrees.
    altitude_m : float
        Height of the circular orbit above the mean Earth radius.
    station_altitude_m : float
        Height of the station above the mean Earth radius.
    """
    r, r_s = _radii(altitude_m, station_altitude_m)
    e = np.radians(np.asarray(elevation_deg, float))
    return np.sqrt(r * r - (r_s * np.cos(e)) ** 2) - r_s * np.sin(e)


def central_angle_rad(elevation_deg, altitude_m, station_altitude_m=0.0):
    """Earth central angle between station and sub-satellite point at an elevation."""
    r, r_s = _radii(altitude_m, station_altitude_m)
    e = np.radians(np.asarray(elevation_deg, float))
    return np.arccos(r_s * np.cos(e) / r) - e


def orbital_period_s(altitude_m):
    """Period of a circular orbit at ``altitude_m`` (Kepler's third law)."""
    r = EARTH_RADIUS_M + np.asarray(altitude_m, float)
    return 2.0 * np.pi * np.sqrt(r**3 / EARTH_GM_M3_S2)


def pass_duration_s(altitude_m, min_elevation_deg, station_altitude_m=0.0):
    """Time above ``min_elevation_deg`` during an overhead pass (Earth rotation ignored)."""
    lam = central_angle_rad(min_elevation_deg, altitude_m, station_altitude_m)
    return lam / np.pi * orbital_period_s(altitude_m)


@dataclass(frozen=True)
class PassTrack:
    """An overhead pass sampled in time, culmination (zenith) at ``time_s = 0``."""

    time_s: np.ndarray
    elevation_deg: np.ndarray
    slant_range_m: np.ndarray
    duration_s: float
    period_s: float


def pass_track(altitude_m: float, min_elevation_deg: float, station_altitude_m: float = 0.0,
               points: int = 241) -> PassTrack:
    """Elevation and slant range over one overhead pass, from rise to set.

    The satellite moves at constant angular rate ``2 pi / T`` along a great
    circle through the station's zenith; at central angle ``theta`` the
    station sees it at height ``r cos(theta) - r_s`` above its horizon plane
    and ``r |sin(theta)|`` along it, which gives elevation and range directly.
    """
    period = float(orbital_period_s(altitude_m))
    duration = float(pass_duration_s(altitude_m, min_elevation_deg, station_altitude_m))
    t = np.linspace(-duration / 2, duration / 2, points)
    theta = 2.0 * np.pi * t / period
    r, r_s = _radii(altitude_m, station_altitude_m)
    up = r * np.cos(theta) - r_s
    along = r * np.abs(np.sin(theta))
    elevation = np.degrees(np.arctan2(up, along))
    return PassTrack(t, elevation, np.hypot(up, along), duration, period)
