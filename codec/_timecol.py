"""The input's time column, kept exactly in the stream's note.

A time column is not coded by the codec (it is no sensor channel); it is
written into the ``[stream]`` table of ``STREAM.profile.toml`` so that
``decode`` gives back the very same numbers:

* **regular**: integer ticks of a decimal resolution ``10**-time_decimals``
  that advance by a fixed ``time_step_ticks`` from ``time_start_ticks``;
* **ticks**: any other clock whose values are whole ticks of a decimal
  resolution (jittered, irregular, epoch seconds): the tick differences,
  zlib-compressed and base64-written (``time_ticks``);
* **float64**: values that are no whole number of any decimal tick up to
  10⁻¹⁵: their IEEE 754 bytes, zlib-compressed and base64-written
  (``time_float64``).

Why ticks are exact: a tick count ``k`` and ``10**d`` are exact doubles below
2⁵³, and IEEE 754 division is correctly rounded, so ``k / 10**d`` is the double
nearest the decimal number — the one a CSV reader made of the same text.
"""

from __future__ import annotations

import base64
import zlib

import numpy as np

__all__ = ["time_fields", "time_values", "describe_time"]

_MAX_DECIMALS = 15
_EXACT = 2.0**53


def _b64(raw: bytes) -> str:
    return base64.b64encode(zlib.compress(raw, 9)).decode("ascii")


def _unb64(text: str) -> bytes:
    return zlib.decompress(base64.b64decode(text.encode("ascii")))


def _decimals(t: np.ndarray) -> tuple[int, np.ndarray] | None:
    """The fewest decimals d with every value a whole number of 10**-d ticks, and the ticks."""
    for d in range(_MAX_DECIMALS + 1):
        scale = 10.0**d
        ticks = np.rint(t * scale)
        if np.abs(ticks).max() >= _EXACT:
            return None
        if np.array_equal(ticks / scale, t):
            return d, ticks.astype(np.int64)
    return None


def time_fields(t: np.ndarray) -> dict:
    """The note's time fields for the time column ``t`` (finite values, any spacing)."""
    t = np.asarray(t, dtype=np.float64)
    if t.size == 0:
        return {}
    if not np.isfinite(t).all():
        # Not a clock we can name in ticks; keep the bytes (nan / inf survive exactly).
        return {"time_float64": _b64(t.astype("<f8").tobytes())}
    found = _decimals(t)
    if found is None:
        return {"time_float64": _b64(t.astype("<f8").tobytes())}
    d, ticks = found
    steps = np.diff(ticks)
    out = {"time_decimals": d}
    if t.size == 1 or (steps == steps[0]).all():
        out.update(time_start_ticks=int(ticks[0]),
                   time_step_ticks=int(steps[0]) if steps.size else 0,
                   # also as plain numbers, for people and for older readers
                   time_start=float(t[0]), time_step=float(steps[0] / 10.0**d) if steps.size
                   else 0.0)
        return out
    deltas = np.diff(ticks, prepend=np.int64(0))
    out["time_ticks"] = _b64(deltas.astype("<i8").tobytes())
    return out


def time_values(note, start: int, count: int) -> np.ndarray | None:
    """Times of samples ``start .. start + count - 1`` from a stream note (None: no time kept)."""
    if note is None:
        return None
    i = start + np.arange(count, dtype=np.int64)
    if getattr(note, "time_float64", None):
        return np.frombuffer(_unb64(note.time_float64), dtype="<f8").astype(np.float64)[i]
    d = getattr(note, "time_decimals", None)
    if getattr(note, "time_ticks", None):
        ticks = np.cumsum(np.frombuffer(_unb64(note.time_ticks), dtype="<i8"))
        return ticks[i] / 10.0**d
    if getattr(note, "time_start_ticks", None) is not None:
        return (note.time_start_ticks + note.time_step_ticks * i) / 10.0**d
    if note.time_start is not None:  # notes written before ticks existed
        return note.time_start + note.time_step * i
    return None


def describe_time(fields: dict, name: str) -> str:
    """One line for the encode report: how the time column is kept."""
    if not fields:
        return f"time column '{name}': none"
    where = "kept exactly in the stream's note (not sent on the link)"
    if "time_float64" in fields:
        return f"time column '{name}': no decimal clock; its float64 values are {where}"
    res = f"1e-{fields['time_decimals']}" if fields["time_decimals"] else "1"
    if "time_ticks" in fields:
        return (f"time column '{name}': irregular clock; integer ticks of {res} are {where}, "
                f"{len(fields['time_ticks'])} characters")
    return (f"time column '{name}': regular clock, start {fields['time_start']!r} + step "
            f"{fields['time_step_ticks']} ticks of {res}, {where}")
