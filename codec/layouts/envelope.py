"""The frame envelope every layout shares: sync marker, length field, CRC, wrapping.

A frame is ``sync(16) | version(4) ... | crc(16)``.  The receiver reads the
version nibble, then the length field by the rule the layout of that version
declares (:class:`codec.layouts.registry.LengthField`, looked up in the
registry), checks the CRC under the profile's :class:`FrameKey`, and only
then trusts any other field.  Two length rules exist:

* ``fixed16``: a 16-bit length in bytes 3 and 4 (after the version and flags
  nibbles): layout 1 and the gap-mask frame;
* ``flagged``: a long flag at bit 20, then an 11-bit length, or a 27-bit one
  when the flag is set: layouts 2 to 4.

Written down in ``FRAME_LAYOUT.md`` ("Envelope", "Profile check").
"""

from __future__ import annotations

import binascii
import hashlib
from dataclasses import dataclass, field

import numpy as np

from .crc import crc16_ibm3740, crc16_span

__all__ = [
    "SYNC",
    "CRC_BYTES",
    "GAP_KIND",
    "EXTENT_BYTES",
    "SHORT_LENGTH_BITS",
    "LONG_LENGTH_BITS",
    "FrameKey",
    "frame_extent",
    "frame_extents",
    "frame_crc_ok",
    "frames_crc_ok",
    "wrap_frames",
]

SYNC = b"\xe3\x5a"
CRC_BYTES = 2
#: Version nibble of the gap-mask frame kind (layout in ``gapmask.py``), valid beside any version.
GAP_KIND = 15
#: Most bytes from a frame's start any length rule reads (layout 1's fixed header).
EXTENT_BYTES = 17
#: Length field of the ``flagged`` rule: 11 bits, or 27 with the long flag set.
SHORT_LENGTH_BITS = 11
LONG_LENGTH_BITS = 27
_GAP_MIN_BYTES = 12  # header (5 bytes with the sync marker), the smallest inner frame without
#                     its sync and CRC (4), one byte of runs, CRC (gapmask.py)


def _rules() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per version nibble: rule kind (0 none, 1 fixed16, 2 flagged), smallest length, bytes read."""
    from .registry import length_rules

    kind, minimum, need = length_rules()
    kind, minimum, need = kind.copy(), minimum.copy(), need.copy()
    kind[GAP_KIND], minimum[GAP_KIND], need[GAP_KIND] = 1, _GAP_MIN_BYTES, 5
    return kind, minimum, need


def frame_extent(mv: memoryview, pos: int) -> int | None:
    """Length in bytes claimed by the frame whose sync marker is at ``pos``.

    This is the envelope rule a receiver uses before it trusts anything else:
    None when the bytes cannot start a frame of a layout version we know (too
    short to hold its length field, unknown version, impossible length).
    Stream search never depends on how a payload is coded.
    """
    if pos + len(SYNC) + 2 > len(mv) or mv[pos : pos + len(SYNC)] != SYNC:
        return None
    u = np.frombuffer(bytes(mv[pos : pos + EXTENT_BYTES]), dtype=np.uint8)
    length, _ = frame_extents(u, np.zeros(1, np.int64))
    return int(length[0]) if length[0] >= 0 else None


def frame_extents(u: np.ndarray, pos: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`frame_extent` of the candidates at byte ``pos`` of ``u`` (sync markers there).

    Returns ``(length, need)``: the claimed length (-1 where
    :func:`frame_extent` gives None) and the bytes from ``pos`` the envelope
    rule read (a candidate nearer the end than that is undecided).  Whole-array.
    """
    kinds, minimum, needs = _rules()
    pos = np.asarray(pos, dtype=np.int64)
    pad = np.concatenate([u, np.zeros(EXTENT_BYTES, np.uint8)]).astype(np.int64)
    b0 = pad[pos + 2]
    version = b0 >> 4
    kind = kinds[version]
    w16 = (pad[pos + 3] << 8) | pad[pos + 4]
    w27 = ((b0 << 24) | (pad[pos + 3] << 16) | (pad[pos + 4] << 8) | pad[pos + 5]) & (
        (1 << LONG_LENGTH_BITS) - 1)
    w11 = ((b0 & 7) << 8) | pad[pos + 3]
    flagged_long = (kind == 2) & ((b0 & 0x08) > 0)
    need = np.select([kind == 1, flagged_long], [needs[version], len(SYNC) + 4], len(SYNC) + 2)
    need = np.maximum(need, len(SYNC) + 2)
    length = np.select(
        [kind == 1, flagged_long, kind == 2],
        [np.where(w16 >= minimum[version], w16, -1),
         np.where(w27 >= (1 << SHORT_LENGTH_BITS), w27, -1),
         np.where(w11 >= minimum[version], w11, -1)], -1)
    length = np.where(pos + need <= u.size, length, -1)
    return length, need


@dataclass(frozen=True)
class FrameKey:
    """The profile's share of every frame's CRC (``FRAME_LAYOUT.md``, "Profile check").

    A frame's CRC-16/IBM-3740 runs over an implicit prefix, then the frame's
    bytes after the sync marker up to the CRC.  The prefix is never sent:
    it is SHA-256(``digest`` || frame length as 4 bytes big-endian), where
    ``digest`` is the 32-byte profile digest
    (:func:`codec._profile.profile_digest`), so a frame made under another
    profile fails its CRC like a damaged one, and each frame length gets an
    independent check.  The CRC register after the prefix (the initial value
    for the frame's own bytes) is cached per length.
    """

    digest: bytes
    _inits: dict = field(default_factory=dict, compare=False, repr=False)

    def prefix(self, length: int) -> bytes:
        """The implicit prefix of a frame of ``length`` bytes."""
        return hashlib.sha256(self.digest + int(length).to_bytes(4, "big")).digest()

    def init(self, length: int) -> int:
        """CRC register after the prefix of a frame of ``length`` bytes."""
        v = self._inits.get(length)
        if v is None:
            if len(self._inits) >= 1 << 16:  # bounded: a long hostile stream claims many lengths
                self._inits.clear()
            v = self._inits[length] = crc16_ibm3740(self.prefix(length))
        return v

    def inits(self, lengths: np.ndarray) -> np.ndarray:
        """:meth:`init` of every length (one hash per distinct length)."""
        uniq, inv = np.unique(np.asarray(lengths, dtype=np.int64), return_inverse=True)
        vals = np.fromiter((self.init(v) for v in uniq.tolist()), dtype=np.uint16,
                           count=uniq.size)
        return vals[inv.reshape(-1)]


def frame_crc_ok(mv: memoryview, pos: int, length: int, key: FrameKey) -> bool:
    """Whether the frame at ``pos`` of ``length`` bytes passes its CRC under ``key``."""
    end = pos + length
    if end > len(mv):
        return False
    return binascii.crc_hqx(mv[pos + len(SYNC) : end - CRC_BYTES], key.init(length)) == \
        int.from_bytes(mv[end - CRC_BYTES : end], "big")


def frames_crc_ok(states: np.ndarray, u: np.ndarray, pos: np.ndarray, length: np.ndarray,
                  key: FrameKey) -> np.ndarray:
    """CRC verdicts of whole candidate frames at ``pos`` (each inside ``u``), whole-array.

    ``states`` are :func:`codec.layouts.crc.crc16_prefix_states` of ``u``: each check
    costs the same whatever the length the candidate claims.
    """
    end = pos + length
    field_ = (u[end - 2].astype(np.uint16) << 8) | u[end - 1]
    return crc16_span(states, pos + len(SYNC), end - CRC_BYTES, key.inits(length)) == field_


def wrap_frames(body: np.ndarray, body_bytes: np.ndarray, key: FrameKey) -> np.ndarray:
    """Frames from their bodies: sync marker + body + CRC-16 (under ``key``), back to back.

    ``body`` holds every frame's bytes between the sync marker and the CRC, frame
    after frame; ``body_bytes`` gives each frame's share.  Every layout version
    ends its frames this way, so the envelope rule can check any of them.
    """
    body_bytes = np.asarray(body_bytes, dtype=np.int64)
    length = body_bytes + len(SYNC) + CRC_BYTES
    out = np.empty(int(length.sum()), dtype=np.uint8)
    ostart = np.cumsum(length) - length
    bstart = np.cumsum(body_bytes) - body_bytes
    dest = np.repeat(ostart + len(SYNC) - bstart, body_bytes) + np.arange(body.size)
    out[dest] = body
    out[ostart[:, None] + np.arange(len(SYNC))] = np.frombuffer(SYNC, np.uint8)
    # CRC of the implicit prefix (``FrameKey``: the register it leaves starts each frame's
    # CRC) then the body, one C call per frame: a sender knows where its frames are, so
    # it needs none of the receiver's prefix scan (about ten times the work per byte)
    mv = memoryview(np.ascontiguousarray(body, dtype=np.uint8))
    inits = key.inits(length).tolist()
    crc = np.fromiter((binascii.crc_hqx(mv[a : a + n], i) for a, n, i in
                       zip(bstart.tolist(), body_bytes.tolist(), inits)),
                      dtype=np.int64, count=len(inits))
    cpos = ostart + length - CRC_BYTES
    out[cpos] = crc >> 8
    out[cpos + 1] = crc & 0xFF
    return out
