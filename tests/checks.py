"""Round-trip helpers shared by the codec tests, built on the independent checker.

The budgets are recomputed by :mod:`verify` from the input, the profile and the
decoded samples alone; nothing here reads the encoder's own ``budget`` or
``met`` fields.
"""

from __future__ import annotations

import numpy as np
from verify import assert_budgets

__all__ = ["assert_meets_target", "assert_roundtrip"]


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
