"""CRCs from the published catalogue, computed by the standard library.

``binascii.crc_hqx`` with initial value 0xFFFF is CRC-16/IBM-3740 (poly 0x1021,
no reflection, xorout 0; check value 0x29B1), and ``zlib.crc32`` is
CRC-32/ISO-HDLC (check value 0xCBF43926); both are C code, so we do not
hand-write either.
"""

from __future__ import annotations

import binascii
import zlib

__all__ = ["crc16_ibm3740", "crc32_iso_hdlc"]


def crc16_ibm3740(data: bytes | memoryview) -> int:
    """CRC-16/IBM-3740 (also called CRC-16/CCITT-FALSE) of ``data``."""
    return binascii.crc_hqx(data, 0xFFFF)


def crc32_iso_hdlc(data: bytes | memoryview) -> int:
    """CRC-32/ISO-HDLC (the zlib/Ethernet CRC) of ``data``."""
    return zlib.crc32(data) & 0xFFFFFFFF
