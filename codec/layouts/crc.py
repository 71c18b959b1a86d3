"""CRCs from the published catalogue, computed by the standard library.

``binascii.crc_hqx`` with initial value 0xFFFF is CRC-16/IBM-3740 (poly 0x1021,
no reflection, xorout 0; check value 0x29B1), and ``zlib.crc32`` is
CRC-32/ISO-HDLC (check value 0xCBF43926); both are C code, so we do not
hand-write either.
"""

from __future__ import annotations

import binascii
import zlib

__all__ = ["crc16_ibm3740", "crc32_iso_hdlc", "crc16_shift", "crc16_prefix_states", "crc16_span"]


def crc16_ibm3740(data: bytes | memoryview) -> int:
    """CRC-16/IBM-3740 (also called CRC-16/CCITT-FALSE) of ``data``.

    Parameters
    ----------
    data : bytes-like
        The bytes to check.

    Returns
    -------
    int
        The 16-bit CRC: polynomial 0x1021, initial value 0xFFFF, no reflection,
        no final XOR.

    Examples
    --------
    The catalogue check value (CRC of the ASCII bytes "123456789") is 0x29B1
    (G. Cook, "Catalogue of parametrised CRC algorithms", CRC-16/IBM-3740):

    >>> hex(crc16_ibm3740(b"123456789"))
    '0x29b1'
    """
    return binascii.crc_hqx(data, 0xFFFF)


def crc32_iso_hdlc(data: bytes | memoryview) -> int:
    """CRC-32/ISO-HDLC (the zlib/Ethernet CRC) of ``data``.

    Parameters
    ----------
    data : bytes-like
        The bytes to check.

    Returns
    -------
    int
        The 32-bit CRC, unsigned.

    Examples
    --------
    The catalogue check value for "123456789" is 0xCBF43926 (G. Cook,
    "Catalogue of parametrised CRC algorithms", CRC-32/ISO-HDLC):

    >>> hex(crc32_iso_hdlc(b"123456789"))
    '0xcbf43926'
    """
    return zlib.crc32(data) & 0xFFFFFFFF


# ---------------------------------------------------------------------------
# CRC-16/IBM-3740 as linear algebra, so a receiver can check many candidate
# frames of a long buffer in time linear in the buffer, whatever they claim.
#
# The register update for one byte b is r' = (r * x^8 mod G) xor T[b], with
# T[b] the CRC of the single byte b from a zero register; both parts are linear
# over GF(2).  So with S[k] the register after the first k bytes of a buffer
# (from any start value), the CRC of bytes a..b-1 from the initial value I is
#     M_(b-a)(I xor S[a]) xor S[b],    M_m(r) = r * x^(8m) mod G,
# and every S[k] comes out of one prefix scan (Hillis & Steele 1986) in log2
# steps over the whole buffer.  M_m for any m is composed from M_(2^j).
# ---------------------------------------------------------------------------

import numpy as _np  # noqa: E402  (the vectorized half only)

#: T[b]: CRC-16 (poly 0x1021) of the one byte b from a zero register, by the standard library.
_T16 = _np.array([binascii.crc_hqx(bytes([b]), 0) for b in range(256)], dtype=_np.uint16)
_POW_STEPS = 28  # M_(2^j) for j < 28 covers every frame length (< 2^27 bytes)


def _shift_tables() -> tuple[_np.ndarray, _np.ndarray]:
    """Per j, tables (high byte, low byte) of M_(2^j): M(r) = H[j][r >> 8] ^ L[j][r & 255]."""
    r = _np.arange(65536, dtype=_np.uint32)
    f = (((r << 8) & 0xFFFF) ^ _T16[r >> 8]).astype(_np.uint16)  # M_1 on every register value
    hi = _np.empty((_POW_STEPS, 256), _np.uint16)
    lo = _np.empty((_POW_STEPS, 256), _np.uint16)
    b = _np.arange(256)
    for j in range(_POW_STEPS):
        hi[j], lo[j] = f[b << 8], f[b]
        f = f[f]  # M_(2^(j+1)) = M_(2^j) o M_(2^j)
    return hi, lo


_SH_HI, _SH_LO = _shift_tables()


def crc16_shift(r: _np.ndarray, m: _np.ndarray) -> _np.ndarray:
    """M_m(r) = r * x^(8m) mod G for CRC-16/IBM-3740's G, element-wise (m < 2^28)."""
    r = _np.asarray(r, dtype=_np.uint16).copy()
    m = _np.broadcast_to(_np.asarray(m, dtype=_np.int64), r.shape)
    for j in range(int(m.max(initial=0)).bit_length()):
        sel = ((m >> j) & 1).astype(bool)
        if sel.any():
            v = r[sel]
            r[sel] = _SH_HI[j][v >> 8] ^ _SH_LO[j][v & 0xFF]
    return r


def crc16_prefix_states(buf: _np.ndarray, start: int = 0xFFFF) -> _np.ndarray:
    """S[k], k = 0 .. len(buf): the CRC-16/IBM-3740 register after the first k bytes.

    ``S[0] = start``; any start value serves :func:`crc16_span`, which only
    uses differences.  One prefix scan over the buffer: O(n log n) NumPy work.
    """
    y = _np.empty(buf.size + 1, dtype=_np.uint16)
    y[0] = start
    y[1:] = _T16[buf]
    d, j = 1, 0
    while d < y.size:
        v = y[:-d]
        y[d:] ^= _SH_HI[j][v >> 8] ^ _SH_LO[j][v & 0xFF]
        d, j = 2 * d, j + 1
    return y


def crc16_span(states: _np.ndarray, a: _np.ndarray, b: _np.ndarray, init: _np.ndarray
               ) -> _np.ndarray:
    """CRC-16/IBM-3740 from ``init`` of bytes ``a .. b-1`` of the buffer ``states`` came from."""
    return crc16_shift(init ^ states[a], b - a) ^ states[b]
