"""Former home of layouts 3 and 4: their names, kept for code not yet moved.

New code imports from :mod:`codec.layouts.v3` and :mod:`codec.layouts.v4`.
This module only re-exports them (``parse_frames_v3`` as the former dict) and
goes once nothing imports it.
"""

from __future__ import annotations

from . import v3 as _v3
from .legacy import as_dict
from .v3 import LAYOUT_VERSION_3, FrameBatchV3, channel_bits, pack_frames_v3
from .v4 import LAYOUT_VERSION_4

__all__ = ["LAYOUT_VERSION_3", "LAYOUT_VERSION_4", "FrameBatchV3", "pack_frames_v3",
           "parse_frames_v3", "channel_bits"]


def parse_frames_v3(data, offsets, lengths, n, channels, has_mean,
                    version: int = LAYOUT_VERSION_3) -> dict:
    """:func:`codec.layouts.v3.parse_frames_v3` as the former dict of arrays."""
    p = _v3.parse_frames_v3(data, offsets, lengths, n, channels, has_mean, version)
    return as_dict(p, trellis=version != LAYOUT_VERSION_3, several=True)
