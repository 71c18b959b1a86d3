"""Frame layout version 6: layout 5 with a choice of basis per channel and frame.

Version 6 is version 5 bit for bit except the version field and, when the
profile's basis has an alternate (:func:`codec.transform.bases.alternate_basis`:
the Haar basis beside the DCT at a power-of-two N), one more bit at the end
of each channel's first subframe header in the frame: 1 when every window of
that channel in the frame is coded on the alternate basis.  Written down bit
by bit in ``FRAME_LAYOUT.md`` ("Version 6").

The encoder moves a budget block (frame scope) to the alternate basis when
its estimated bits there are clearly fewer (``codec.encoder``); a block on
the alternate basis is never predicted.
"""

from __future__ import annotations

from .registry import register_layout
from .v3 import SWITCH_VERSION, Layout3

__all__ = ["LAYOUT_VERSION_6", "LAYOUT_6", "layout6"]

#: Version 6: version 5 with a basis switch per channel and frame.
LAYOUT_VERSION_6 = SWITCH_VERSION


def layout6() -> Layout3:
    """Layout 6: the routines of layout 3 with the prediction fields and the basis bit.

    Examples
    --------
    >>> lay = layout6()
    >>> lay.version, lay.predicts, lay.switches_basis, lay.has_trellis
    (6, True, True, False)
    """
    return Layout3(version=LAYOUT_VERSION_6, predicts=True, switches_basis=True)


LAYOUT_6 = register_layout(layout6())
