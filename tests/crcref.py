"""CRCs written from their catalogue parameters, for the tests only.

The codec computes its CRCs with the standard library (``binascii.crc_hqx``,
``zlib.crc32``), so comparing it with those functions compares it with itself.
These are written from the parameters in the catalogue of parametrised CRC
algorithms (R. Williams' model, as listed by G. Cook's CRC catalogue; from
memory, confirmed by the check values the tests assert):

* CRC-16/IBM-3740 (also CRC-16/CCITT-FALSE): width 16, poly 0x1021, init 0xFFFF,
  no reflection, xorout 0; check ("123456789") 0x29B1.
* CRC-32/ISO-HDLC: width 32, poly 0x04C11DB7, init 0xFFFFFFFF, input and output
  reflected, xorout 0xFFFFFFFF; check 0xCBF43926.

A 256-entry table is built bit by bit from the polynomial, then applied one byte
at a time (plain Python: slow, but independent of the C code under test).
"""

from __future__ import annotations

__all__ = ["crc16_ibm3740_ref", "crc32_iso_hdlc_ref"]


def _table16() -> list[int]:
    out = []
    for byte in range(256):
        r = byte << 8
        for _ in range(8):
            r = ((r << 1) ^ 0x1021) if r & 0x8000 else (r << 1)
        out.append(r & 0xFFFF)
    return out


def _table32() -> list[int]:
    poly = 0xEDB88320  # 0x04C11DB7 bit-reversed: the reflected form
    out = []
    for byte in range(256):
        r = byte
        for _ in range(8):
            r = (r >> 1) ^ poly if r & 1 else r >> 1
        out.append(r)
    return out


_T16, _T32 = _table16(), _table32()


def crc16_ibm3740_ref(data: bytes) -> int:
    r = 0xFFFF
    for b in bytes(data):
        r = ((r << 8) & 0xFFFF) ^ _T16[(r >> 8) ^ b]
    return r


def crc32_iso_hdlc_ref(data: bytes) -> int:
    r = 0xFFFFFFFF
    for b in bytes(data):
        r = (r >> 8) ^ _T32[(r ^ b) & 0xFF]
    return r ^ 0xFFFFFFFF
