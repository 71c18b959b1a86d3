"""Byte-stuffing framing for serial radio modems: SLIP and COBS.

A serial modem moves bytes with no packet boundaries.  Byte stuffing reserves
one byte value as a packet delimiter and rewrites it wherever it occurs inside
a packet, so a receiver finds packet boundaries after any loss at the next
delimiter.  Each coefwire frame is sent as one packet; the frame keeps its own
sync marker and CRC, so unstuffed bytes feed the ordinary decoder.

* SLIP, RFC 1055 (Romkey 1988): END = 0xC0 delimits; inside a packet END
  becomes ESC ESC_END (0xDB 0xDC) and ESC becomes ESC ESC_ESC (0xDB 0xDD).  As
  the RFC suggests, an END is also sent before each packet to flush line noise.
  The rewriting is four ``bytes.replace`` calls (C code); a library would add
  a dependency for less.
* COBS, Cheshire & Baker, "Consistent Overhead Byte Stuffing", IEEE/ACM
  Trans. Networking 7(2), 1999: zero bytes are removed and replaced by a chain
  of code bytes; 0x00 delimits.  Worst-case overhead is 1 byte in 254.  The
  ``cobs`` package from PyPI does the coding (C extension).

:class:`Unstuffer` takes bytes in chunks of any size and returns whole packets;
it holds at most one packet of :data:`MAX_PACKET` bytes (longer ones are
dropped and counted), so memory stays bounded on any input.
"""

from __future__ import annotations

from cobs import cobs

#: How much of a stream's start :func:`detect_stuffing` looks at.
SNIFF_BYTES = 1 << 16

__all__ = [
    "STUFFINGS",
    "MAX_PACKET",
    "slip_encode",
    "slip_decode",
    "cobs_encode",
    "cobs_decode",
    "stuff",
    "Unstuffer",
    "detect_stuffing",
    "SNIFF_BYTES",
]

STUFFINGS = ("slip", "cobs")
END, ESC, ESC_END, ESC_ESC = 0xC0, 0xDB, 0xDC, 0xDD
_END, _ESC = bytes([END]), bytes([ESC])
#: Longest stuffed packet kept: a 65 535-byte frame doubled by SLIP escaping, plus margin.
MAX_PACKET = 2 * 65535 + 16


def slip_encode(packet: bytes) -> bytes:
    """One SLIP packet (RFC 1055), with END before and after."""
    body = packet.replace(_ESC, bytes([ESC, ESC_ESC])).replace(_END, bytes([ESC, ESC_END]))
    return _END + body + _END


def slip_decode(packet: bytes) -> bytes | None:
    """The bytes of one SLIP packet (between two ENDs), or None on an invalid escape.

    RFC 1055 leaves a byte after ESC other than ESC_END / ESC_ESC undefined; we
    refuse the packet (its frame could not pass the CRC reliably anyway).
    """
    pair_end, pair_esc = bytes([ESC, ESC_END]), bytes([ESC, ESC_ESC])
    # Every ESC starts exactly one pair and pairs cannot overlap (their second byte
    # is not ESC), so the escapes are valid iff the counts agree.
    if packet.count(_ESC) != packet.count(pair_end) + packet.count(pair_esc):
        return None
    return packet.replace(pair_end, _END).replace(pair_esc, _ESC)


def cobs_encode(packet: bytes) -> bytes:
    """One COBS packet (Cheshire & Baker 1999) followed by the 0x00 delimiter."""
    return cobs.encode(packet) + b"\x00"


def cobs_decode(packet: bytes) -> bytes | None:
    """The bytes of one COBS packet (without its delimiter), or None when it is not valid COBS."""
    try:
        return cobs.decode(packet)
    except cobs.DecodeError:
        return None


def stuff(frames: list[bytes], kind: str) -> bytes:
    """Each frame as one packet of ``kind`` (``slip`` or ``cobs``), back to back.

    Parameters
    ----------
    frames : list of bytes
        The frames, one packet each.
    kind : {"slip", "cobs"}
        The stuffing.

    Returns
    -------
    bytes
        The stuffed stream.

    Examples
    --------
    SLIP (RFC 1055): END before and after the packet, END inside becomes ESC
    ESC_END and ESC becomes ESC ESC_ESC:

    >>> stuff([bytes([0xC0, 0x01, 0xDB])], "slip").hex(" ")
    'c0 db dc 01 db dd c0'

    COBS (Cheshire & Baker 1999: each code byte is the distance to the next
    zero, which it replaces; hand computed from that definition): 11 22 00 33
    becomes 03 11 22 02 33, then the 00 delimiter:

    >>> stuff([bytes([0x11, 0x22, 0x00, 0x33])], "cobs").hex(" ")
    '03 11 22 02 33 00'
    """
    enc = {"slip": slip_encode, "cobs": cobs_encode}[kind]
    return b"".join(enc(f) for f in frames)


class Unstuffer:
    """Packets out of a stuffed byte stream fed in chunks of any size.

    ``bad_packets`` counts packets with an invalid escape or COBS code chain,
    ``overlong`` those longer than :data:`MAX_PACKET` (dropped).

    Parameters
    ----------
    kind : {"slip", "cobs"}
        The stuffing.

    Examples
    --------
    >>> u = Unstuffer("cobs")
    >>> stream = stuff([b"\\x11\\x22\\x00\\x33", b"ab"], "cobs")
    >>> u.feed(stream[:3]), u.feed(stream[3:]), u.close()
    ([], [b'\\x11"\\x003', b'ab'], [])
    >>> u.packets, u.bad_packets
    (2, 0)
    """

    def __init__(self, kind: str):
        if kind not in STUFFINGS:
            raise ValueError(f"unknown stuffing {kind!r}")
        self.kind = kind
        self._delim = _END if kind == "slip" else b"\x00"
        self._decode = slip_decode if kind == "slip" else cobs_decode
        self._buf = bytearray()
        self._skipping = False  # inside an overlong packet: drop up to the next delimiter
        self.bad_packets = 0
        self.overlong = 0
        self.packets = 0

    def feed(self, chunk: bytes) -> list[bytes]:
        """Bytes in; complete packets' contents out."""
        out: list[bytes] = []
        parts = bytes(chunk).split(self._delim)
        for k, part in enumerate(parts):
            last = k == len(parts) - 1
            if not self._skipping:
                self._buf += part
            if last:
                if len(self._buf) > MAX_PACKET:
                    self.overlong += 1
                    self._buf.clear()
                    self._skipping = True
                break
            self._finish(out)
        return out

    def close(self) -> list[bytes]:
        """End of stream: a packet without its closing delimiter is still tried."""
        out: list[bytes] = []
        self._finish(out)
        return out

    def _finish(self, out: list[bytes]) -> None:
        if self._skipping:
            self._skipping = False
            self._buf.clear()
            return
        if not self._buf:
            return  # empty packet: the leading END of SLIP, or line idle
        packet = self._decode(bytes(self._buf))
        self._buf.clear()
        if packet is None:
            self.bad_packets += 1
        elif packet:  # an empty packet carries no frame
            self.packets += 1
            out.append(packet)


def detect_stuffing(head: bytes, key=None) -> str | None:
    """The stuffing (``slip`` or ``cobs``) that ``head``, a stream's first bytes, was written with.

    None when the bytes read as plain frames at least as well.  A stuffed
    stream read as plain bytes loses every frame that contains an escaped
    byte (SLIP) or any zero byte (COBS: almost all), so the stuffing that
    yields more CRC-valid frames is the one used.  ``key`` is the profile's
    share of the CRC (:func:`codec.frame_key`); without it no CRC can be checked.
    """
    from .search import locate_frames  # the frame search; imported late to keep this module light

    best, found = None, len(locate_frames(head, key).frames)
    for kind in STUFFINGS:
        u = Unstuffer(kind)
        frames = len(locate_frames(b"".join(u.feed(head) + u.close()), key).frames)
        if frames > found:
            best, found = kind, frames
    return best
