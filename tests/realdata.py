"""Real recordings shipped inside registry packages, for tests (nothing is downloaded).

Motion: a six-channel strong-motion accelerograph record, the Kinemetrics EVT
file ``BX456_MOLA-02351.evt`` that ``obspy`` (PyPI, LGPL-3.0) ships among its
test data (``obspy/io/kinemetrics/tests/data``), read with obspy's own EVT
reader: 6 channels at 250 Hz, 9750 samples each (39 s), in the digitizer's
counts (its header: 2.5 V full scale, sensors of 2.497 V/g, range 2 g).  The
counts are kept as recorded: they are the sensor's own numbers, with no
conversion of ours in between.

Weather: ``vega_datasets`` (PyPI, BSD-3-Clause) ships public-domain NOAA
series as CSV files (``vega_datasets/_data``): hourly temperatures of Seattle
in 2010 (``seattle-temps.csv``, degrees Fahrenheit) and daily weather of
Seattle 2012-2015 (``seattle-weather.csv``: precipitation in mm, maximum and
minimum temperature in degrees Celsius, wind in m/s).  Read with NumPy, not
through the package (which would import pandas).
"""

from __future__ import annotations

import functools
import importlib.util
import warnings
from pathlib import Path

import numpy as np

__all__ = ["motion", "MOTION_CHANNELS", "MOTION_RATE_HZ", "MOTION_SOURCE", "vega_csv"]

#: One name per channel of the accelerograph record, in the file's order.
MOTION_CHANNELS = [f"acc_{i}" for i in range(6)]
MOTION_RATE_HZ = 250.0
MOTION_SOURCE = "Kinemetrics EVT record BX456_MOLA-02351 shipped in obspy (LGPL-3.0)"


def _package_folder(name: str) -> Path:
    spec = importlib.util.find_spec(name)
    if spec is None or not spec.submodule_search_locations:
        raise RuntimeError(f"the test extra needs {name} (pip install -e '.[test]')")
    return Path(spec.submodule_search_locations[0])


@functools.cache
def _motion_counts() -> np.ndarray:
    path = _package_folder("obspy") / "io/kinemetrics/tests/data/BX456_MOLA-02351.evt"
    with warnings.catch_warnings():
        # obspy warns on import (entry-point API of importlib) and on header fields of
        # this file it does not decode; neither touches the samples. Warnings are
        # errors in the tests, so they are silenced here only.
        warnings.simplefilter("ignore")
        from obspy.io.kinemetrics.core import read_evt

        stream = read_evt(str(path))
    rates = {tr.stats.sampling_rate for tr in stream}
    if len(stream) != len(MOTION_CHANNELS) or rates != {MOTION_RATE_HZ}:
        raise RuntimeError(f"unexpected content in {path}: {stream}")
    x = np.column_stack([np.asarray(tr.data, dtype=np.float64) for tr in stream])
    x.setflags(write=False)
    return x


def motion(split: str = "both") -> np.ndarray:
    """The accelerograph record, (samples x 6) float array of counts (a fresh copy).

    ``split`` is ``train`` (the first half), ``test`` (the second half) or
    ``both``.
    """
    x = _motion_counts()
    half = x.shape[0] // 2
    part = {"train": x[:half], "test": x[half:], "both": x}[split]
    return part.copy()


def vega_csv(name: str, columns: tuple[int, ...]) -> np.ndarray:
    """Numeric ``columns`` of ``vega_datasets/_data/<name>.csv`` (header skipped)."""
    path = _package_folder("vega_datasets") / "_data" / f"{name}.csv"
    return np.genfromtxt(path, delimiter=",", skip_header=1, usecols=columns)
