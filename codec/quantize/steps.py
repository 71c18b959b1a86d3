"""Uniform scalar quantization with a per-frame step carried as a small code.

The step is ``2 ** ((code - STEP_CODE_BIAS) / 8)``: an eighth-octave grid from
2**-64 to about 2**64 that covers any engineering unit.  It is computed with
``ldexp`` from a table of eight exact constants, so encoder and decoder obtain
bit-identical steps on any IEEE-754 machine without calling a libm ``pow``.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "STEP_CODE_BITS",
    "STEP_CODE_BIAS",
    "STEP_CODE_MAX",
    "step_from_code",
    "code_for_step",
]

STEP_CODE_BITS = 10
STEP_CODE_MAX = (1 << STEP_CODE_BITS) - 1
STEP_CODE_BIAS = 512

# 2 ** (k / 8) for k = 0..7, correctly rounded float64 constants.
_FRACTIONS = np.array([float.fromhex(h) for h in (
    "0x1.0000000000000p+0",
    "0x1.172b83c7d517bp+0",
    "0x1.306fe0a31b715p+0",
    "0x1.4bfdad5362a27p+0",
    "0x1.6a09e667f3bcdp+0",
    "0x1.8ace5422aa0dbp+0",
    "0x1.ae89f995ad3adp+0",
    "0x1.d5818dcfba487p+0",
)])


def step_from_code(code: np.ndarray | int) -> np.ndarray:
    """Quantizer step for each step code (exact, platform independent)."""
    code = np.asarray(code, dtype=np.int64)
    shifted = code - STEP_CODE_BIAS
    return np.ldexp(_FRACTIONS[shifted % 8], (shifted // 8).astype(np.int32))


def code_for_step(step: np.ndarray | float) -> np.ndarray:
    """Smallest code whose step is at least ``step`` (clipped to the code range)."""
    step = np.asarray(step, dtype=np.float64)
    with np.errstate(divide="ignore"):
        guess = np.ceil(np.log2(np.maximum(step, 1e-300)) * 8.0).astype(np.int64) + STEP_CODE_BIAS
    guess = np.clip(guess, 0, STEP_CODE_MAX)
    # log2 may be off by one ulp: step the guess so that step_from_code(g) >= step.
    low = step_from_code(np.maximum(guess - 1, 0)) >= step
    guess = np.where(low & (guess > 0), guess - 1, guess)
    high = step_from_code(guess) < step
    return np.clip(np.where(high, guess + 1, guess), 0, STEP_CODE_MAX)

