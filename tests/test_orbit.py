"""Circular-orbit pass geometry checked by plane geometry and by a brute-force 3-D walk."""

from __future__ import annotations

import math

import numpy as np
import pytest

from link_sim._budget import compute_budget, pass_summary
from link_sim._linkfile import link_from_dict
from link_sim._orbit import (
    EARTH_RADIUS_M,
    central_angle_rad,
    orbital_period_s,
    pass_duration_s,
    pass_track,
    slant_range_m,
)

RE = EARTH_RADIUS_M


@pytest.mark.parametrize("h", [300e3, 550e3, 1200e3, 20_200e3])
def test_slant_range_at_zenith_and_horizon(h):
    # Geometry: straight up the range is the altitude; at 0 deg the line of sight is
    # tangent to the sphere, a right angle at the station: d = sqrt((Re + h)^2 - Re^2).
    assert float(slant_range_m(90.0, h)) == pytest.approx(h, rel=1e-12)
    assert float(slant_range_m(0.0, h)) == pytest.approx(math.sqrt((RE + h) ** 2 - RE**2),
                                                         rel=1e-12)
    # A station 1 km up sees the satellite 1 km nearer at zenith.
    assert float(slant_range_m(90.0, h, 1000.0)) == pytest.approx(h - 1000.0, rel=1e-12)


def test_slant_range_agrees_with_law_of_cosines():
    # Geometry: the same triangle closed by the central angle lambda:
    # d^2 = r_s^2 + r^2 - 2 r_s r cos(lambda).
    h, hs = 550e3, 400.0
    e = np.linspace(0, 90, 19)
    lam = central_angle_rad(e, h, hs)
    r, rs = RE + h, RE + hs
    d = np.sqrt(rs**2 + r**2 - 2 * rs * r * np.cos(lam))
    np.testing.assert_allclose(slant_range_m(e, h, hs), d, rtol=1e-9)
    assert np.all(np.diff(slant_range_m(e, h, hs)) < 0)  # higher means nearer


def test_geostationary_period_is_one_sidereal_day():
    # Kepler's third law with GM = 3.986004418e14 m^3/s^2; a geostationary orbit has radius
    # 42 164 km and period one sidereal day, 86 164.1 s (both from memory).
    assert float(orbital_period_s(42_164e3 - RE)) == pytest.approx(86_164.1, abs=2.0)


def test_pass_duration_against_a_brute_force_3d_walk():
    # Independent check: move the satellite in 3-D along a great circle through the
    # station's zenith at the Kepler angular rate, take the elevation from the dot product
    # with the local vertical, and count the time above the minimum elevation.
    h, e_min, hs = 550e3, 10.0, 0.0
    period = 2 * math.pi * math.sqrt((RE + h) ** 3 / 3.986004418e14)
    t = np.arange(-900.0, 900.0, 0.01)
    ang = 2 * math.pi * t / period
    sat = np.stack([(RE + h) * np.cos(ang), (RE + h) * np.sin(ang), np.zeros_like(ang)], 1)
    sta = np.array([RE + hs, 0.0, 0.0])
    los = sat - sta
    sin_el = los @ (sta / np.linalg.norm(sta)) / np.linalg.norm(los, axis=1)
    above = np.degrees(np.arcsin(sin_el)) >= e_min
    assert float(pass_duration_s(h, e_min, hs)) == pytest.approx(above.sum() * 0.01, abs=0.05)
    # And the sampled track rises from the minimum elevation to the zenith and back.
    track = pass_track(h, e_min, hs, points=201)
    assert track.elevation_deg[0] == pytest.approx(e_min, abs=1e-9)
    assert track.elevation_deg[100] == pytest.approx(90.0, abs=1e-9)
    assert track.elevation_deg[-1] == pytest.approx(e_min, abs=1e-9)
    np.testing.assert_allclose(track.slant_range_m,
                               slant_range_m(track.elevation_deg, h, hs), rtol=1e-9)


def _orbit_link(**changes):
    base = dict(frequency_hz=437e6, orbit=dict(altitude_m=550e3, min_elevation_deg=10.0),
                tx_power_w=1.0, tx_antenna_gain_dbi=0.0, rx_antenna_gain_dbi=14.0,
                system_noise_temperature_k=400.0, data_rate_bps=9600.0, required_margin_db=3.0)
    base.update(changes)
    return link_from_dict(base)


def test_orbit_budget_uses_the_worst_range_and_margin_grows_to_zenith():
    b = compute_budget(_orbit_link())
    assert b.distance_m == pytest.approx(float(slant_range_m(10.0, 550e3)))
    p = pass_summary(b)
    rows = p["table"]
    assert rows[0]["elevation_deg"] == 10.0 and rows[-1]["elevation_deg"] == 90.0
    assert rows[0]["margin_db"] == pytest.approx(b.figures["margin_db"], abs=1e-9)
    # Margin gained from the edge to zenith is the path loss ratio 20 log10(d_edge / h).
    assert rows[-1]["margin_db"] - rows[0]["margin_db"] == pytest.approx(
        20 * math.log10(b.distance_m / 550e3), abs=1e-9)
    assert all(a["margin_db"] < c["margin_db"] for a, c in zip(rows, rows[1:]))
    # Whole pass usable here: volume = rate x duration.
    assert p["usable_duration_s"] == pytest.approx(p["pass_duration_s"])
    assert p["data_volume_bits"] == pytest.approx(9600.0 * p["pass_duration_s"])


def test_partly_usable_pass_starts_where_the_margin_reaches_the_requirement():
    # Raise the rate until the edge of the pass lacks margin but the zenith has it.
    b = compute_budget(_orbit_link(data_rate_bps=500e3))
    p = pass_summary(b)
    assert p["table"][0]["margin_db"] < 3.0 < p["table"][-1]["margin_db"]
    e = p["usable_from_elevation_deg"]
    assert 10.0 < e < 90.0
    # At that elevation the margin is exactly the required margin (margin arithmetic).
    d = float(slant_range_m(e, 550e3))
    margin_there = b.figures["margin_db"] + 20 * math.log10(b.distance_m / d)
    assert margin_there == pytest.approx(3.0, abs=1e-6)
    assert p["usable_duration_s"] == pytest.approx(float(pass_duration_s(550e3, e)))
    assert p["data_volume_bits"] == pytest.approx(500e3 * p["usable_duration_s"])


def test_frames_per_pass():
    p = pass_summary(compute_budget(_orbit_link()), bits_per_frame=1000.0)
    assert p["frames_per_pass"] == int(p["data_volume_bits"] // 1000.0)


def test_fixed_link_has_no_pass():
    link = _orbit_link(orbit=None, distance_m=10e3)
    assert pass_summary(compute_budget(link)) is None


def test_worked_example_with_the_mission_analysis_handbook_formulas():
    # Space Mission Analysis and Design (Wertz & Larson, 3rd ed., 1999), sec. 5.2 "Earth
    # geometry as viewed from space" (formulas from memory; the numbers below are worked
    # here with those formulas, not copied from the book).  Its route goes through angles
    # and the law of sines, unlike ours (a square root from the law of cosines):
    #   sin rho = R_E / (R_E + H)            angular radius of the Earth seen from orbit
    #   sin eta = sin rho cos eps            nadir angle at elevation eps
    #   lambda  = 90 deg - eps - eta         Earth central angle
    #   D       = R_E sin lambda / sin eta   slant range
    # and the time in view of an overhead pass, T = P lambda_max / 180 deg.
    # Worked for H = 1000 km, eps = 10 deg, R_E = 6371.0088 km:
    #   sin rho = 6371.0088 / 7371.0088 = 0.86433  -> rho = 59.807 deg
    #   sin eta = 0.86433 cos 10 deg = 0.85120     -> eta = 58.343 deg
    #   lambda  = 90 - 10 - 58.343 = 21.657 deg
    #   D = 6371.0088 x sin 21.657 deg / 0.85120 = 6371.0088 x 0.36905 / 0.85120 = 2762.3 km
    #   P = 2 pi sqrt(7371.0088e3^3 / 3.986004418e14) s = 104.97 min
    #   T = 104.97 min x 21.657 / 180 = 12.63 min
    h, eps = 1000e3, 10.0
    assert float(slant_range_m(eps, h)) / 1e3 == pytest.approx(2762.3, abs=0.1)
    assert math.degrees(float(central_angle_rad(eps, h))) == pytest.approx(21.657, abs=1e-3)
    assert float(orbital_period_s(h)) / 60 == pytest.approx(104.97, abs=0.01)
    assert float(pass_duration_s(h, eps)) / 60 == pytest.approx(12.63, abs=0.01)
    # The same formulas over a grid of altitudes and elevations, against our functions.
    for hh in (400e3, 550e3, 800e3, 1500e3):
        e = np.linspace(0.0, 89.0, 90)
        rho = np.arcsin(RE / (RE + hh))
        eta = np.arcsin(np.sin(rho) * np.cos(np.radians(e)))
        lam = np.radians(90.0 - e) - eta
        np.testing.assert_allclose(slant_range_m(e, hh), RE * np.sin(lam) / np.sin(eta),
                                   rtol=1e-9)
        np.testing.assert_allclose(central_angle_rad(e, hh), lam, rtol=1e-9, atol=1e-12)


def test_pass_budget_worked_example():
    # The data a 550 km orbit's overhead pass carries above 10 deg at 9600 bit/s, by the
    # handbook formulas above: rho = asin(6371.0088 / 6921.0088) = 67.004 deg,
    # eta = asin(sin 67.004 x cos 10) = 65.032 deg, lambda = 14.968 deg, P = 95.502 min,
    # T = 95.502 x 14.968 / 180 = 7.941 min = 476.5 s; 9600 x 476.5 = 4.574 Mbit a pass, and
    # one pass per orbit averages 4.574e6 / 5730.1 s = 798.3 bit/s.
    p = pass_summary(compute_budget(_orbit_link()))
    assert p["pass_duration_s"] == pytest.approx(476.5, abs=0.1)
    assert p["orbital_period_s"] / 60 == pytest.approx(95.50, abs=0.01)
    assert p["data_volume_bits"] == pytest.approx(4.574e6, rel=2e-4)
    assert p["pass_averaged_rate_bps"] == pytest.approx(798.3, rel=2e-4)
