"""Independent checks shared by the codec tests.

These recompute, with plain NumPy and without calling the codec's own
selection code, what a decoded stream must satisfy.
"""

from __future__ import annotations

import numpy as np

__all__ = ["frame_error_table", "assert_meets_target", "assert_roundtrip", "budget_group_size"]

# The codec never asks for precision below 2**-40 of a frame's peak (float noise);
# the independent check allows that same floor.
FLOAT_FLOOR = 2.0**-40
# ...nor below the finest step its layout can name, 2**-64 units (half a step per term).
LAYOUT_FLOOR_PER_SAMPLE = (2.0**-65) ** 2


def frame_error_table(x, x_hat, n, reference):
    """Per (window, channel): error energy, reference energy, valid count, peak."""
    rows = []
    for start in range(0, x.shape[0], n):
        seg, rec = x[start : start + n], x_hat[start : start + n]
        for c in range(x.shape[1]):
            s, r = seg[:, c], rec[:, c]
            err = float(np.sum((s - r) ** 2))
            ref = float(np.sum((s - s.mean()) ** 2)) if reference == "ac" else float(np.sum(s**2))
            rows.append((err, ref, s.size, float(np.abs(s).max()), c))
    return rows


def budget_group_size(profile) -> int:
    """Windows of one channel that share one budget: those of one frame in frame scope.

    Frame scope applies to layouts 3 and 4, whose frames carry
    ``windows_per_frame`` consecutive windows (windows w with the same
    w // windows_per_frame); every other case budgets each window alone.
    """
    if getattr(profile, "fidelity_scope", "window") == "frame" and profile.layout_version >= 3:
        return profile.windows_per_frame
    return 1


def assert_meets_target(x, x_hat, profile, first_window: int = 0):
    """Every budget of ``x_hat`` holds: the profile's fidelity, resolution floor included.

    A budget covers one window of one channel, or in frame scope the windows
    of one channel in one frame: max((1 - F) sum E_ref, sum N res**2 / 12, ...)
    summed over those windows, recomputed here from the input alone.
    """
    assert x_hat.shape == x.shape
    res = [c.resolution for c in profile.channels] if profile.channels else [0.0] * x.shape[1]
    group = budget_group_size(profile)
    blocks: dict = {}
    rows = frame_error_table(x, x_hat, profile.frame_length, profile.reference)
    for i, (err, ref, valid, peak, c) in enumerate(rows):
        w = first_window + i // x.shape[1]
        b = blocks.setdefault((w // group, c), [0.0, 0.0, 0.0, 0.0, 0.0])
        b[0] += err
        b[1] += ref
        b[2] += valid * res[c] ** 2 / 12
        b[3] += valid * (peak * FLOAT_FLOOR) ** 2
        b[4] += profile.frame_length * LAYOUT_FLOOR_PER_SAMPLE
    for err, ref, sensor, flt, layout in blocks.values():
        budget = max((1 - profile.fidelity) * ref, sensor, flt, layout)
        assert err <= budget * (1 + 1e-12), (err, budget, ref)


def assert_roundtrip(profile, samples):
    """decode(encode(x)) meets the target on every frame, and re-encoding is stable."""
    import codec

    enc = codec.encode(samples, profile)
    dec = codec.decode(enc.data, enc.profile, samples=samples.shape[0])
    assert dec.delivered.all()
    assert np.array_equal(dec.samples, enc.reconstruction)
    assert_meets_target(np.asarray(samples, float), dec.samples, enc.profile)
    again = codec.encode(samples, profile)
    assert again.data == enc.data  # deterministic: same input, same bytes
    return enc, dec
