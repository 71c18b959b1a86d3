"""Frame layout version 5: layout 3 with long-term prediction inside a frame.

Version 5 is version 3 bit for bit except the version field, one more
frame-header flag (``predict``, when the frame carries more than one window)
and, in frames with that flag set, two more subframe-header fields after
the count: the lag of the channel (in its first subframe of the frame,
:func:`codec.transform.predict.lag_bits` bits, 0 = not predicted) and, in
each later subframe whose window the lag can reach (``lag <= offset * N``),
one bit saying whether the window is predicted.  A predicted window is
decoded as the channel's decoded samples ``lag`` back in the frame plus the
coded window (:mod:`codec.transform.predict`).  Written down bit by bit in
``FRAME_LAYOUT.md`` ("Version 5").

The encoder searches a lag per budget block in frame scope and keeps, frame
by frame, whichever of the predicted and the plain coding takes fewer bytes.
"""

from __future__ import annotations

from .registry import register_layout
from .v3 import PREDICTION_VERSION, Layout3

__all__ = ["LAYOUT_VERSION_5", "LAYOUT_5", "layout5"]

#: Version 5: version 3 with long-term prediction (``codec.transform.predict``).
LAYOUT_VERSION_5 = PREDICTION_VERSION


def layout5() -> Layout3:
    """Layout 5: the routines of layout 3 with version 5 and the prediction fields.

    Examples
    --------
    >>> lay = layout5()
    >>> lay.version, lay.predicts, lay.has_trellis
    (5, True, False)
    """
    return Layout3(version=LAYOUT_VERSION_5, predicts=True)


LAYOUT_5 = register_layout(layout5())
