"""Vectorized MSB-first bit packing of many variable-width fields at once.

The frame layout module describes *what* goes where; these helpers only move
bits.  Packing scatters every bit of every field into one array with NumPy (no
Python loop over fields or samples); reading gathers an unaligned field of up
to 57 bits from a 64-bit big-endian window.
"""

from __future__ import annotations

import numpy as np

__all__ = ["pack_fields", "read_fields", "to_twos", "from_twos", "signed_width", "MAX_FIELD_BITS"]

#: Widest field :func:`read_fields` can gather from one 64-bit window.
MAX_FIELD_BITS = 57


def pack_fields(values: np.ndarray, widths: np.ndarray) -> np.ndarray:
    """Concatenate unsigned ``values`` of the given bit ``widths``, MSB first.

    Parameters
    ----------
    values : array of uint64/int64
        Non-negative field values; each must fit its width (at most 57 bits).
    widths : array of int
        Bit width of each field (0 allowed: the field is absent).

    Returns
    -------
    ndarray of uint8
        The packed bytes; the last byte is zero-padded.

    Notes
    -----
    Each field lands in a window of three 32-bit words starting at the word
    holding its first bit.  Its three 32-bit parts are summed into their words
    with ``np.bincount``; fields never overlap, so the sums are ORs and stay
    below 2**32, exact in float64.  The work is per field, not per bit.
    """
    values = np.asarray(values).astype(np.uint64, copy=False)
    widths = np.asarray(widths, dtype=np.int64)
    total = int(widths.sum())
    if total == 0:
        return np.zeros(0, dtype=np.uint8)
    if widths.max() > MAX_FIELD_BITS:
        raise ValueError(f"field wider than {MAX_FIELD_BITS} bits")
    pos = np.cumsum(widths) - widths
    word = pos >> 5
    shift = 96 - (pos & 31) - widths  # left shift of the value inside the 96-bit window
    m32 = np.uint64(0xFFFFFFFF)

    def _shl(v, k):  # v << k for 0 <= k < 64, else 0 (NumPy shifts >= 64 are undefined)
        ok = (k >= 0) & (k < 64)
        return np.where(ok, v << np.clip(k, 0, 63).astype(np.uint64), np.uint64(0))

    def _shr(v, k):
        ok = (k >= 0) & (k < 64)
        return np.where(ok, v >> np.clip(k, 0, 63).astype(np.uint64), np.uint64(0))

    live = widths > 0
    low = _shl(values, shift) & m32
    mid = np.where(shift >= 32, _shl(values, shift - 32), _shr(values, 32 - shift)) & m32
    high = np.where(shift >= 64, _shl(values, shift - 64), _shr(values, 64 - shift)) & m32
    nwords = (total + 31) // 32 + 2
    acc = np.bincount(word[live], weights=high[live], minlength=nwords)
    acc += np.bincount(word[live] + 1, weights=mid[live], minlength=nwords)
    acc += np.bincount(word[live] + 2, weights=low[live], minlength=nwords)
    out = acc.astype(">u4").view(np.uint8)
    return out[: (total + 7) // 8].copy()


def read_fields(buf: np.ndarray, bitpos: np.ndarray, widths: np.ndarray) -> np.ndarray:
    """Read unsigned fields of ``widths`` bits starting at bit offsets ``bitpos``.

    ``buf`` is a uint8 array; reading past its end raises IndexError (callers
    check lengths first).  Width 0 reads as 0.
    """
    bitpos = np.asarray(bitpos, dtype=np.int64)
    widths = np.asarray(widths, dtype=np.int64)
    if bitpos.size == 0:
        return np.zeros(0, dtype=np.int64)
    if widths.max(initial=0) > MAX_FIELD_BITS:
        raise ValueError(f"field wider than {MAX_FIELD_BITS} bits")
    end = (bitpos + widths + 7) // 8
    if end.max(initial=0) > buf.size or bitpos.min(initial=0) < 0:
        raise IndexError("field reaches past the end of the buffer")
    padded = np.concatenate([buf, np.zeros(8, dtype=np.uint8)])
    byte0 = bitpos // 8
    window = padded[byte0[:, None] + np.arange(8)]
    word = window.view(">u8").reshape(-1).astype(np.uint64)
    word = word << (bitpos % 8).astype(np.uint64)
    out = np.where(widths > 0, word >> (64 - np.maximum(widths, 1)).astype(np.uint64), 0)
    return out.astype(np.int64)


def signed_width(values: np.ndarray, axis: int = -1) -> np.ndarray:
    """Bits needed to hold every value along ``axis`` in two's complement (>= 1)."""
    values = np.asarray(values, dtype=np.int64)
    if values.shape[axis] == 0:
        return np.ones(np.delete(values.shape, axis), dtype=np.int64)
    # x >= 0 needs bit_length(x) + 1; x < 0 needs bit_length(-x - 1) + 1.
    mag = np.where(values < 0, -values - 1, values)
    top = mag.max(axis=axis)
    return _bit_length(top) + 1


def to_twos(values: np.ndarray, widths: np.ndarray) -> np.ndarray:
    """Two's complement bit patterns of signed ``values`` in ``widths`` bits."""
    values = np.asarray(values, dtype=np.int64)
    mask = (np.uint64(1) << np.asarray(widths, dtype=np.uint64)) - np.uint64(1)
    return values.astype(np.uint64) & mask


def from_twos(patterns: np.ndarray, widths: np.ndarray) -> np.ndarray:
    """Signed values from two's complement ``patterns`` of ``widths`` bits."""
    patterns = np.asarray(patterns, dtype=np.int64)
    widths = np.asarray(widths, dtype=np.int64)
    sign = np.where(widths > 0, np.left_shift(1, np.maximum(widths, 1) - 1), 0)
    return np.where(patterns & sign, patterns - 2 * sign, patterns)


def _bit_length(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x, dtype=np.int64)
    _, exp = np.frexp(x.astype(np.float64))
    # frexp is exact for integers below 2**53; fix the rare rounding above it.
    exp = exp.astype(np.int64)
    exp = np.where((exp > 0) & (np.left_shift(1, np.maximum(exp - 1, 0)) > x), exp - 1, exp)
    return np.where(x > 0, exp, 0)
