"""The link description file: shipped examples load; bad keys and values are named."""

from __future__ import annotations

from pathlib import Path

import pytest

from codec import ProfileError
from link_sim._linkfile import LinkFile, load_link

PROFILES = Path(__file__).resolve().parents[1] / "profiles"

GOOD = """\
frequency_hz = 868.0e6
distance_m = 15000.0
tx_power_w = 0.025
tx_antenna_gain_dbi = 2.15
rx_antenna_gain_dbi = 6.0
system_noise_temperature_k = 800.0
data_rate_bps = 1200.0
modulation = "bpsk"
fec = "none"
target_ber = 1e-5
required_margin_db = 10.0

[losses_db]
cable = 1.5
"""


def _write(tmp_path, text, name="x.link.toml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_shipped_examples_load():
    files = sorted(PROFILES.glob("*.link.toml"))
    assert len(files) >= 2
    kinds = {load_link(f).orbit is not None for f in files}
    assert kinds == {True, False}  # one orbit scenario and one fixed terrestrial link


def test_every_key_names_its_unit():
    # House rule: units in every key of a human-written file.
    units = ("_hz", "_m", "_w", "_dbi", "_db", "_k", "_bps", "_deg", "_bits")
    unitless = {"description", "orbit", "modulation", "fec", "target_ber"}  # names or ratios
    for name in LinkFile.model_fields:
        assert name in unitless or name.endswith(units), name


def test_good_file_loads(tmp_path):
    link = load_link(_write(tmp_path, GOOD))
    assert link.frequency_hz == 868e6 and link.losses_db == {"cable": 1.5}


@pytest.mark.parametrize("edit,expect", [
    (("frequency_hz = 868.0e6", "frequency_hz = -5.0"), ["frequency_hz", ">= 3000"]),
    (("tx_power_w = 0.025", "tx_power_w = 0.0"), ["tx_power_w", "> 0"]),
    (("cable = 1.5", "cable = -2.0"), ["losses_db.cable", ">= 0"]),
    (("fec = \"none\"", "fec = \"turbo\""), ["fec", "'rs255'"]),
    (("target_ber = 1e-5", "target_ber = 0.7"), ["target_ber", "<= 0.1"]),
    (("data_rate_bps = 1200.0", "data_rate_bps = \"fast\""), ["data_rate_bps", "> 0"]),
    (("data_rate_bps = 1200.0", "data_rate_bps = true"), ["data_rate_bps", "true"]),
    (("data_rate_bps = 1200.0", "data_rate_bps = nan"), ["data_rate_bps", "finite"]),
    (("distance_m = 15000.0", "distance_m = 1.0"), ["ten wavelengths"]),
    (("required_margin_db = 10.0", "required_margin_db = 10.0\nbandwidth = 3"),
     ["unknown key 'bandwidth'"]),
    (("distance_m = 15000.0\n", ""), ["distance_m", "orbit"]),
    (("system_noise_temperature_k = 800.0", "noise_figure_db = 3.0"),
     ["antenna_temperature_k"]),
])
def test_bad_values_name_file_key_and_range(tmp_path, edit, expect):
    old, new = edit
    assert old in GOOD
    path = _write(tmp_path, GOOD.replace(old, new))
    with pytest.raises(ProfileError) as info:
        load_link(path)
    text = str(info.value)
    assert text.startswith(str(path))
    for word in expect:
        assert word in text, text


def test_orbit_table_is_checked(tmp_path):
    text = GOOD.replace("distance_m = 15000.0\n", "") + \
        "[orbit]\naltitude_m = 550e3\nmin_elevation_deg = 95.0\n"
    with pytest.raises(ProfileError, match=r"orbit\.min_elevation_deg.*<= 89"):
        load_link(_write(tmp_path, text))
    with pytest.raises(ProfileError, match=r"unknown key 'orbit\.inclination_deg'"):
        load_link(_write(tmp_path, text.replace("95.0", "10.0") + "inclination_deg = 51.6\n"))


def test_unreadable_files(tmp_path):
    with pytest.raises(ProfileError, match="no such link file"):
        load_link(tmp_path / "missing.link.toml")
    with pytest.raises(ProfileError, match="not valid TOML"):
        load_link(_write(tmp_path, "frequency_hz = = 3"))


def test_link_file_offers_what_the_simulator_simulates(tmp_path):
    from link_sim import NoCode, fec_names, register_fec, unregister_fec
    from link_sim._channels import MODULATIONS

    def with_fec(name):
        return _write(tmp_path, GOOD.replace('fec = "none"', f'fec = "{name}"'))

    for name in fec_names():
        assert load_link(with_fec(name)).fec == name
    with pytest.raises(ProfileError, match="unknown FEC code 'turbo'"):
        load_link(with_fec("turbo"))
    # a code registered later is offered too: one registry serves both
    register_fec("repeat1", lambda interleave: NoCode())
    try:
        assert load_link(with_fec("repeat1")).fec == "repeat1"
    finally:
        unregister_fec("repeat1")
    assert LinkFile.model_fields["modulation"].annotation.__args__ == MODULATIONS
