"""Decoded CSV values carry the digits their channel's resolution needs, no more.

Reference: Python's ``float()`` and ``decimal.Decimal`` read the written text
(correctly rounded decimal conversion); 17 significant digits return any
IEEE 754 double exactly (IEEE 754-2008, clause 5.12.2).
"""

from decimal import Decimal

import numpy as np
import pytest

from codec import ChannelSpec, Profile
from codec._io import csv_decimals
from codec._profile import save_profile
from codec.cli import main


@pytest.mark.parametrize(("res", "err", "want"), [
    (0.01, None, 3), (0.1, None, 2), (1.0, None, 1), (0.001, None, 4), (0.025, None, 3),
    (10.0, None, 0), (0.0, None, None), (0.01, 0.0005, 5),
])
def test_decimals_one_finer_than_the_resolution(res, err, want):
    assert csv_decimals(res, err) == want


def test_decoded_csv_digits(tmp_path):
    rng = np.random.default_rng(8)
    x = np.c_[271.5 + np.cumsum(0.02 * rng.normal(size=512)), rng.normal(size=512)]
    np.save(tmp_path / "in.npy", x)
    prof = Profile(channels=(ChannelSpec(name="ch0", resolution=0.01, unit="K"),
                             ChannelSpec(name="ch1")))
    save_profile(prof, tmp_path / "p.toml")
    assert main(["encode", str(tmp_path / "in.npy"), "-p", str(tmp_path / "p.toml"),
                 "-o", str(tmp_path / "s.cwire")]) == 0
    assert main(["decode", str(tmp_path / "s.cwire"), "-o", str(tmp_path / "o.csv")]) == 0
    assert main(["decode", str(tmp_path / "s.cwire"), "-o", str(tmp_path / "o.npy")]) == 0
    full = np.load(tmp_path / "o.npy")
    rows = [ln.split(",") for ln in (tmp_path / "o.csv").read_text().splitlines()[1:]]
    temp = [r[0] for r in rows]
    assert all(-Decimal(t).as_tuple().exponent == 3 for t in temp)  # 0.01 K -> 3 decimals
    # rounding moved no value by more than half of the last written digit (1/20 of 0.01 K)
    assert np.abs(np.array([float(t) for t in temp]) - full[:, 0]).max() <= 0.0005 + 1e-12
    # no resolution: full precision, every double back exactly
    assert np.array([float(r[1]) for r in rows]).tobytes() == full[:, 1].tobytes()
