"""Frame layout version 4: layout 3 with a per-subframe choice of dependent quantization.

Version 4 is version 3 bit for bit except the version field and one more
subframe-header bit after the count: 1 when the subframe's integers are
levels of dependent (trellis-coded) quantization (:mod:`codec.quantize.trellis`),
whose range-coder contexts also name the quantizer each level belongs to;
0 for the scalar quantizer of version 3.  The encoder codes each frame (or
budget block) both ways and keeps the cheaper.

The layout composes a :class:`codec.layouts.v3.Layout3` built with its own
version number and the quantizer bit switched on.
"""

from __future__ import annotations

from .registry import register_layout
from .v3 import Layout3

__all__ = ["LAYOUT_VERSION_4", "LAYOUT_4", "layout4"]

#: Version 4: version 3 with levels of dependent quantization (``codec.quantize.trellis``).
LAYOUT_VERSION_4 = 4


def layout4() -> Layout3:
    """Layout 4: the routines of layout 3 with version 4 and a quantizer bit per subframe."""
    return Layout3(version=LAYOUT_VERSION_4, trellis=True)


LAYOUT_4 = register_layout(layout4())
