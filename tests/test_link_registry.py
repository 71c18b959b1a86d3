"""A channel model and an FEC code added the way DEVELOPERS.md's recipes say.

Each is one small definition plus one registration, and the simulator uses it
with no other change.  The checks are against textbook formulas:

* The rate-1/3 repetition code with majority decoding on a binary symmetric
  channel of crossover p leaves a bit wrong with probability 3 p^2 (1 - p) + p^3
  (S. Lin and D. J. Costello, *Error Control Coding*, 2nd ed., 2004, sec. 1.4:
  a block decoded wrongly when more than half of its n = 3 bits flip).
* A channel that flips every bit makes every frame fail its CRC.
"""

from __future__ import annotations

import numpy as np
import pytest

import codec
from link_sim import (
    ChannelConfig,
    Code,
    DecodeStats,
    channel_kinds,
    fec_names,
    register_channel,
    register_fec,
    simulate,
    unregister_channel,
    unregister_fec,
)


class Repeat3(Code):
    """Each bit sent three times, decoded by majority vote (test-only code)."""

    name = "repeat3"
    rate = 1 / 3

    def channel_bits(self, n_bytes: int) -> int:
        return 24 * n_bytes

    def encode(self, data) -> np.ndarray:
        bits = np.unpackbits(np.frombuffer(bytes(data), np.uint8))
        return np.repeat(bits, 3)

    def decode(self, received: np.ndarray, n_bytes: int):
        votes = received[: 24 * n_bytes].reshape(-1, 3).sum(axis=1)
        return np.packbits((votes >= 2).astype(np.uint8)), DecodeStats(n_bytes, 0)


@pytest.fixture
def repeat3():
    register_fec("repeat3", lambda interleave: Repeat3())
    yield
    unregister_fec("repeat3")


def _signal():
    t = np.arange(4096)
    x = np.stack([np.sin(2 * np.pi * t / 97.0), np.cos(2 * np.pi * t / 53.0)], axis=1)
    return x, codec.default_profile()


def test_registered_code_reaches_its_textbook_error_rate(repeat3):
    assert "repeat3" in fec_names()
    x, profile = _signal()
    p = 0.05
    trials = 16
    row = simulate(x, profile, ChannelConfig("bsc", ber=p), fec="repeat3", trials=trials,
                   seed=3)
    expect = 3 * p**2 * (1 - p) + p**3  # Lin & Costello sec. 1.4
    assert row["bits_on_air"] == 3 * row["bits_codec"]
    # each information bit is wrong independently with probability `expect`: the mean over
    # every trial's bits lies within 4 binomial standard errors (a few thousand bits each)
    n = row["bits_codec"] * trials
    assert abs(row["ber_post_fec"] - expect) <= 4 * np.sqrt(expect * (1 - expect) / n)


def test_registered_channel_is_used_by_the_simulator():
    register_channel("invert", lambda bits, cfg, rng, rate, soft: bits ^ np.uint8(1))
    try:
        assert "invert" in channel_kinds()
        x, profile = _signal()
        row = simulate(x, profile, ChannelConfig("invert"), trials=1)
        assert row["ber_channel"] == 1.0
        assert row["frames_delivered"] == 0  # every frame fails its CRC
    finally:
        unregister_channel("invert")


def test_names_cannot_be_taken_twice_and_built_ins_stay():
    with pytest.raises(ValueError, match="already registered"):
        register_fec("rs255", lambda interleave: Repeat3())
    with pytest.raises(ValueError, match="cannot be withdrawn"):
        unregister_channel("awgn")
