"""Hypothesis strategies shared by the codec's property tests.

Profiles are drawn over the layouts registered when the example is drawn
(:func:`codec.layouts.registry.layouts`), so a layout registered by a test
is drawn like a built-in one.
"""

from __future__ import annotations

import numpy as np
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

import codec

__all__ = ["BUILTIN_BASES", "layout_versions", "profiles", "sample_arrays", "v1_frames"]

BUILTIN_BASES = ["identity", "dct", "legendre", "haar", "walsh"]


@st.composite
def layout_versions(draw) -> int:
    """The version number of a layout registered at draw time."""
    from codec.layouts.registry import layouts

    return draw(st.sampled_from([lay.version for lay in layouts()]))


@st.composite
def profiles(draw, layout: bool = True) -> codec.Profile:
    """Profiles over every built-in basis, frame lengths 8-64, fidelities 0.5-1, both
    references, one or several windows and channels per frame; with ``layout``, any
    registered layout (else the default, for a check that runs every layout itself)."""
    version = draw(layout_versions()) if layout else 3
    return codec.Profile(
        basis=draw(st.sampled_from(BUILTIN_BASES)), frame_length=draw(st.sampled_from([8, 16, 32,
                                                                                      64])),
        fidelity=draw(st.sampled_from([0.5, 0.9, 0.99, 0.999, 1.0])),
        reference=draw(st.sampled_from(["total", "ac"])), layout_version=version,
        windows_per_frame=draw(st.sampled_from([1, 3, 8])),
        multi_channel_frames=draw(st.booleans()))


def sample_arrays(max_samples: int = 70, max_channels: int = 3):
    """Arrays of samples x channels with any finite values: constants, zeros, huge offsets."""
    return arrays(np.float64, st.tuples(st.integers(1, max_samples),
                                        st.integers(1, max_channels)),
                  elements=st.floats(-1e6, 1e6, allow_nan=False))


#: One layout-1 frame: channel, sequence, step code, valid, mean and up to 12 terms
#: (distinct indices below 16, values up to 2**45), for the bitstring packer check.
v1_frames = st.integers(0, 12).flatmap(lambda t: st.tuples(
    st.integers(0, 255), st.integers(0, 2**20), st.integers(0, 1023), st.integers(1, 16),
    st.integers(-(2**40), 2**40),
    st.lists(st.integers(0, 15), min_size=t, max_size=t, unique=True),
    st.lists(st.integers(-(2**45), 2**45), min_size=t, max_size=t)))
