"""One vocabulary for the status of every decoded sample, shared by codec and link_sim.

Each sample position of each channel gets one small integer code (uint8) and
one name.  The decoder (:func:`codec.decode`, :class:`codec.StreamDecoder`)
sets ``lost``, ``delivered`` and ``gap``; a receiver that fills lost spans
(the link simulator's concealment) sets ``concealed``.  The codes are stable
(they appear as ``status_codes`` in JSON reports); a receiver may add its own
codes from :data:`FIRST_FREE_STATUS` on.

========== ==== =============================================================
name       code meaning
========== ==== =============================================================
lost       0    no CRC-valid frame delivered this sample
delivered  1    decoded from a frame that passed its CRC and every header check
gap        2    the sender marked the sample missing at the source (NaN kept)
concealed  3    filled by a receiver's concealment policy, not received
========== ==== =============================================================
"""

from __future__ import annotations

__all__ = ["LOST", "DELIVERED", "GAP", "CONCEALED", "FIRST_FREE_STATUS", "STATUS_NAMES",
           "STATUS_CODES"]

LOST = 0
DELIVERED = 1
GAP = 2
CONCEALED = 3
FIRST_FREE_STATUS = 4
#: Code -> name, the names used as JSON keys (``samples_<name>``) and in reports.
STATUS_NAMES: dict[int, str] = {LOST: "lost", DELIVERED: "delivered", GAP: "gap",
                                CONCEALED: "concealed"}
#: Name -> code.
STATUS_CODES: dict[str, int] = {name: code for code, name in STATUS_NAMES.items()}
