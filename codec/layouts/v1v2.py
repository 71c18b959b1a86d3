"""Former home of layouts 1 and 2 and the envelope: their names, kept for code not yet moved.

New code imports from :mod:`codec.layouts.envelope`, :mod:`codec.layouts.v1`,
:mod:`codec.layouts.v2` and :mod:`codec.layouts.subframes`.  This module only
re-exports them (``parse_frames_v2`` as the former dict) and goes once nothing
imports it.
"""

from __future__ import annotations

from . import v2 as _v2
from .envelope import (
    CRC_BYTES,
    GAP_KIND,
    INNER_KEY_LABEL,
    LONG_LENGTH_BITS,
    SHORT_LENGTH_BITS,
    SYNC,
    FrameKey,
    frame_crc_ok,
    frame_extent,
    frame_extents,
    frames_crc_ok,
    wrap_frames,
)
from .legacy import as_dict
from .subframes import (
    STEP_BITS,
    count_bits,
    read_subheaders,
    size_length_fields,
    subframes_fit,
    write_frame_heads,
    write_subheaders,
)
from .v1 import (
    HEADER_BYTES,
    HEADER_FIELDS,
    LAYOUT_VERSION,
    FrameBatch,
    expected_length,
    index_bits,
    pack_frame_reference,
    pack_frames,
    parse_headers,
    parse_payloads,
    unpack_frame_reference,
)
from .v2 import (
    CONTEXT_WINDOW,
    LAYOUT_VERSION_2,
    FrameBatchV2,
    pack_frames_v2,
    payload_bits_v2,
    rice_parameters,
)

__all__ = [
    "LAYOUT_VERSION", "SYNC", "GAP_KIND", "HEADER_FIELDS", "HEADER_BYTES", "CRC_BYTES",
    "INNER_KEY_LABEL", "FrameBatch", "index_bits", "pack_frames", "parse_headers",
    "parse_payloads", "expected_length", "pack_frame_reference", "unpack_frame_reference",
    "frame_extent", "frame_crc_ok", "FrameKey", "frame_extents", "frames_crc_ok",
    "LAYOUT_VERSION_2", "CONTEXT_WINDOW", "FrameBatchV2", "pack_frames_v2", "parse_frames_v2",
    "payload_bits_v2", "rice_parameters", "wrap_frames", "read_subheaders", "write_subheaders",
    "subframes_fit", "STEP_BITS", "count_bits", "size_length_fields", "write_frame_heads",
    "SHORT_LENGTH_BITS", "LONG_LENGTH_BITS",
]


def parse_frames_v2(data, offsets, lengths, n, channels, has_mean) -> dict:
    """:func:`codec.layouts.v2.parse_frames_v2` as the former dict of arrays."""
    return as_dict(_v2.parse_frames_v2(data, offsets, lengths, n, channels, has_mean))
