"""Frame layout version 7: layout 6 with a flag per channel and frame dropping the count
fields, and one range-coded string per channel of a multi-channel frame.

Version 7 is version 6 except the version field and:

* a bit ``all_terms`` before the count of each channel's first subframe in
  the frame: 1 when none of the channel's subframes in the frame has a count
  field and each codes all N coefficients.  The encoder sets it where the
  channel's count fields cost more than the zeros after them
  (:func:`codec.layouts.v3.pack_frames_v3`);
* in a multi-channel frame each channel's coefficients are a range-coded
  string of their own, channel by channel, and each channel's first
  subframe header but the last channel's ends with its string's length in
  bytes (the frame length field's width).  So a receiver decodes such a
  frame in as many short lanes as single-channel frames, and the frame
  header is paid once for every channel.

Written down bit by bit in ``FRAME_LAYOUT.md`` ("Version 7").
"""

from __future__ import annotations

from .registry import register_layout
from .v3 import STRINGS_VERSION, Layout3

__all__ = ["LAYOUT_VERSION_7", "LAYOUT_7", "layout7"]

#: Version 7: version 6 with the all-terms flag and a string per channel.
LAYOUT_VERSION_7 = STRINGS_VERSION


def layout7() -> Layout3:
    """Layout 7: the routines of layout 3 with the fields of layout 6 and version 7's.

    Examples
    --------
    >>> lay = layout7()
    >>> lay.version, lay.predicts, lay.switches_basis, lay.has_trellis
    (7, True, True, False)
    """
    return Layout3(version=LAYOUT_VERSION_7, predicts=True, switches_basis=True)


LAYOUT_7 = register_layout(layout7())
