"""Figures tell their series apart, and the demo profiles' plausible ranges are physical.

Line styles: common practice, no source (colour plus dash pattern survives
grey-scale printing and colour-vision deficiency).  Physical limits, each named
beside its check; the demo data must lie inside its own plausible ranges.
"""

import numpy as np
import pytest

from codec._io import read_samples
from codec._plots import MAX_SERIES, series_styles
from codec._profile import load_profile
from codec.cli._demo import SCENARIOS, scenario_files


def test_24_series_each_have_their_own_colour_and_neighbours_differ_in_style():
    names = [f"s{i}" for i in range(MAX_SERIES)]
    st = series_styles(names)
    colours = [st[n]["color"].lower() for n in names]
    assert len(set(colours)) == MAX_SERIES == 24
    for a, b in zip(names, names[1:]):
        assert st[a]["ls"] != st[b]["ls"] and st[a]["marker"] != st[b]["marker"]
    with pytest.raises(ValueError):
        series_styles(names + ["one more"])


# Limits (from memory of the usual references): relative humidity 0-100 % by its
# definition (WMO Guide No. 8); wind speed is a magnitude, >= 0; global irradiance >= 0
# and below the solar constant, about 1361 W/m² (Kopp & Lean 2011); sea-level pressure
# records about 870-1084 hPa; the geomagnetic field below about 65 000 nT (IGRF).
PHYSICAL = {
    "rel_humidity_pct": (0.0, 100.0), "wind_speed_m_s": (0.0, None),
    "solar_w_m2": (0.0, 1400.0), "pressure_hpa": (850.0, 1090.0),
    "mag_x_nt": (-66000.0, 66000.0), "mag_y_nt": (-66000.0, 66000.0),
    "mag_z_nt": (-66000.0, 66000.0), "sun_sensor": (0.0, 1.0),
    "air_temp_k": (180.0, 340.0), "panel_temp_k": (150.0, 420.0),
}


@pytest.mark.parametrize("name", SCENARIOS)
def test_demo_profiles_ranges_are_physical_and_hold_the_data(name):
    csv, toml = scenario_files(name)
    prof = load_profile(toml)
    data = read_samples(csv)
    for c, ch in enumerate(prof.channels):
        assert ch.unit, ch.name
        lo, hi = PHYSICAL.get(ch.name, (None, None))
        if lo is not None:
            assert ch.valid_min >= lo, ch.name
        if hi is not None:
            assert ch.valid_max <= hi, ch.name
        col = data.values[:, c]
        assert np.all((col >= ch.valid_min) & (col <= ch.valid_max)), ch.name
