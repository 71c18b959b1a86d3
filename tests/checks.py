"""Round-trip helpers shared by the codec tests, built on the independent checker.

The budgets are recomputed by :mod:`verify` from the input, the profile and the
decoded samples alone; nothing here reads the encoder's own ``budget`` or
``met`` fields.
"""

from __future__ import annotations

import numpy as np
from verify import assert_budgets

__all__ = ["assert_meets_target", "assert_roundtrip", "assert_png_is_a_picture"]


def assert_meets_target(x, x_hat, profile, scope: str | None = None):
    """Every budget block of ``x_hat`` meets the profile's target (floors included)."""
    return assert_budgets(np.asarray(x, float), x_hat, profile, scope)


def assert_roundtrip(profile, samples):
    """decode(encode(x)) meets the target on every budget block, and re-encoding is stable."""
    import codec

    enc = codec.encode(samples, profile)
    dec = codec.decode(enc.data, enc.profile, samples=samples.shape[0])
    assert dec.delivered.all()
    assert np.array_equal(dec.samples, enc.reconstruction)
    assert_meets_target(np.asarray(samples, float), dec.samples, enc.profile)
    again = codec.encode(samples, profile)
    assert again.data == enc.data  # deterministic: same input, same bytes
    return enc, dec


def assert_png_is_a_picture(path):
    """Decode the PNG (matplotlib.image.imread, an independent reader) and check it is
    a real picture: a plausible size and drawn ink, not a blank canvas."""
    import matplotlib.image

    img = matplotlib.image.imread(path)
    assert img.ndim == 3 and img.shape[0] >= 200 and img.shape[1] >= 200, img.shape
    ink = (img[..., :3] < 0.9).any(axis=2)  # not (near) white
    assert 0.01 < ink.mean() < 0.9, ink.mean()
    assert len(np.unique(img[..., :3].reshape(-1, 3), axis=0)) > 8  # lines, text, colours
