"""Independent checks shared by the codec tests.

These recompute, with plain NumPy and without calling the codec's own
selection code, what a decoded stream must satisfy.
"""

from __future__ import annotations

import numpy as np

__all__ = ["frame_error_table", "assert_meets_target", "assert_roundtrip"]

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


def assert_meets_target(x, x_hat, profile):
    """Every frame of ``x_hat`` meets the profile's fidelity, resolution floor included."""
    assert x_hat.shape == x.shape
    res = [c.resolution for c in profile.channels] if profile.channels else [0.0] * x.shape[1]
    for err, ref, valid, peak, c in frame_error_table(x, x_hat, profile.frame_length,
                                                       profile.reference):
        budget = max((1 - profile.fidelity) * ref, valid * res[c] ** 2 / 12,
                     valid * (peak * FLOAT_FLOOR) ** 2,
                     profile.frame_length * LAYOUT_FLOOR_PER_SAMPLE)
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
