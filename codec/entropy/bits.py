"""Bit I/O of the codec: MSB-first fields written and read on whole arrays at once.

The frame layouts describe *what* goes where; this module only moves bits, and
it is the only one that does.  :func:`pack_fields` writes many fields of
different widths in one vectorized step (the work is per field, never per bit
or per Python loop iteration); :class:`BitReader` reads fields at arbitrary bit
positions of one buffer, many positions per call; :func:`read_fields` is a
one-shot read that refuses positions past the end.  :func:`bit_length` is the
vectorized ``int.bit_length`` every coder here sizes its fields with.

Bit order: the first field starts at the most significant bit of the first
byte; each field is written most significant bit first; the last byte is
zero-padded.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "pack_fields",
    "BitReader",
    "read_fields",
    "bit_length",
    "to_twos",
    "from_twos",
    "signed_width",
    "MAX_FIELD_BITS",
]

#: Widest field one read can gather: a 64-bit window shifted by up to 7 bits.
MAX_FIELD_BITS = 57


def bit_length(x: np.ndarray) -> np.ndarray:
    """Vectorized ``int.bit_length`` of non-negative integers below 2**63.

    Parameters
    ----------
    x : array_like of int
        Non-negative integers (0 gives 0).

    Returns
    -------
    ndarray of int64
        Bits needed to write each value in binary.

    Notes
    -----
    The exponent of ``np.frexp`` is the bit length, and exact below 2**53; above
    that the conversion to float64 may round up to the next power of two, which
    the second step corrects.

    Examples
    --------
    >>> bit_length(np.array([0, 1, 5, 2**53 - 1, 2**63 - 1])).tolist()
    [0, 1, 3, 53, 63]
    """
    x = np.asarray(x, dtype=np.int64)
    exp = np.frexp(x.astype(np.float64))[1].astype(np.int64)
    if x.size and x.max() >= (1 << 53):
        high = exp > 53  # rounded up when x is below 2**(exp - 1)
        exp[high] -= (x[high] >> (exp[high] - 1)) == 0
    return exp


def pack_fields(values: np.ndarray, widths: np.ndarray) -> np.ndarray:
    """Concatenate unsigned ``values`` of the given bit ``widths``, MSB first.

    Parameters
    ----------
    values : array_like of uint64 or int64
        Non-negative field values; each must fit its width.
    widths : array_like of int
        Bit width of each field, 0 to 64 (0: the field is absent).

    Returns
    -------
    ndarray of uint8
        The packed bytes; the last byte is zero-padded.

    Notes
    -----
    Each field lands in one or two 64-bit words; fields never overlap, so the
    words are the bitwise OR of their parts, reduced with
    ``np.bitwise_or.reduceat`` over fields in stream order.  The cost is in the
    number of fields, not of bits, which matters for entropy-coded payloads of
    many short codewords.

    Examples
    --------
    Fields 0b101 (3 bits), 0b1 (1 bit) and 0xF0 (8 bits) make the 12 bits
    1011 1111 0000, padded to two bytes:

    >>> pack_fields(np.array([5, 1, 0xF0]), np.array([3, 1, 8])).tobytes().hex()
    'bf00'
    """
    values = np.asarray(values).astype(np.uint64, copy=False)
    widths = np.asarray(widths, dtype=np.int64)
    keep = widths > 0
    if not keep.all():
        values, widths = values[keep], widths[keep]
    total = int(widths.sum())
    if total == 0:
        return np.zeros(0, dtype=np.uint8)
    if widths.max() > 64:
        raise ValueError("field wider than 64 bits")  # our bug: layouts split longer codes
    end = np.cumsum(widths)
    start = end - widths
    word = start >> 6
    off = start & 63  # bit offset of the field's first bit inside its word
    nwords = (total + 63) >> 6
    out = np.zeros(nwords + 1, dtype=np.uint64)
    # Part in the first word: shift left so the field ends at bit 64 - off - width.
    spill = off + widths - 64  # > 0: this many low bits go to the next word
    left = np.maximum(-spill, 0).astype(np.uint64)
    right = np.maximum(spill, 0).astype(np.uint64)
    first = (values >> right) << left
    idx = np.flatnonzero(np.r_[True, word[1:] != word[:-1]])
    out[word[idx]] |= np.bitwise_or.reduceat(first, idx)
    sp = np.flatnonzero(spill > 0)
    if sp.size:
        # each spilled part is the only one starting at its word's top bits
        out[word[sp] + 1] |= values[sp] << (64 - right[sp])
    return out[:nwords].astype(">u8").view(np.uint8)[: (total + 7) >> 3]


class BitReader:
    """Reads fields at arbitrary bit positions of one byte buffer, many at a time.

    The 64-bit big-endian word starting at each byte is built once, so one read
    is a gather, a shift and a mask.  Reads past the end see zero bits: callers
    check that what they consumed stays inside the frame.

    Parameters
    ----------
    data : bytes or array_like of uint8
        The buffer to read.

    Examples
    --------
    >>> r = BitReader(bytes([0b1011_1111, 0]))
    >>> r.read(np.array([0, 3, 4]), np.array([3, 1, 8])).tolist()
    [5, 1, 240]
    """

    def __init__(self, data: bytes | np.ndarray):
        buf = np.frombuffer(data, dtype=np.uint8) if isinstance(data, bytes | bytearray) \
            else np.asarray(data, dtype=np.uint8)
        #: Number of bits in the buffer.
        self.size_bits = 8 * buf.size
        pad = np.concatenate([buf, np.zeros(16, np.uint8)]).astype(np.uint64)
        m = buf.size + 8
        words = np.zeros(m, dtype=np.uint64)
        for b in range(8):  # eight shifts, each over the whole buffer
            words |= pad[b : b + m] << np.uint64(56 - 8 * b)
        self._words = words

    def peek(self, pos: np.ndarray) -> np.ndarray:
        """The 64 bits from each bit offset ``pos`` on, as uint64 (first bit on top).

        Only the first 57 bits are always whole: up to 7 low bits are zeros
        shifted in.  Offsets beyond the end are clipped to the end.

        Parameters
        ----------
        pos : array_like of int
            Bit offsets.

        Returns
        -------
        ndarray of uint64
            One window per offset.
        """
        pos = np.clip(np.asarray(pos, dtype=np.int64), 0, self.size_bits)
        return self._words[pos >> 3] << (pos & 7).astype(np.uint64)

    def read(self, pos: np.ndarray, width: np.ndarray | int) -> np.ndarray:
        """Unsigned fields of ``width`` bits at bit offsets ``pos``.

        Parameters
        ----------
        pos : array_like of int
            Bit offset of each field's first bit.
        width : array_like of int or int
            Bit width of each field, 0 to :data:`MAX_FIELD_BITS` (0 reads 0).

        Returns
        -------
        ndarray of int64
            The field values.
        """
        pos = np.asarray(pos, dtype=np.int64)
        width = np.broadcast_to(np.asarray(width, dtype=np.int64), pos.shape)
        out = self.peek(pos) >> (64 - np.maximum(width, 1)).astype(np.uint64)
        return np.where(width > 0, out, 0).astype(np.int64)


def read_fields(buf: np.ndarray, bitpos: np.ndarray, widths: np.ndarray) -> np.ndarray:
    """Read unsigned fields of ``widths`` bits starting at bit offsets ``bitpos``.

    A one-shot :meth:`BitReader.read` that refuses to read outside the buffer.

    Parameters
    ----------
    buf : ndarray of uint8
        The buffer.
    bitpos : array_like of int
        Bit offset of each field's first bit.
    widths : array_like of int
        Bit width of each field, 0 to :data:`MAX_FIELD_BITS` (0 reads 0).

    Returns
    -------
    ndarray of int64
        The field values.

    Raises
    ------
    IndexError
        If a field reaches past the end of ``buf`` (callers check lengths first,
        so this is a bug).

    Examples
    --------
    >>> read_fields(np.array([0xBF, 0x00], np.uint8), np.array([0, 4]), np.array([4, 8])).tolist()
    [11, 240]
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
    return BitReader(buf).read(bitpos, widths)


def signed_width(values: np.ndarray, axis: int = -1) -> np.ndarray:
    """Bits needed to hold every value along ``axis`` in two's complement (>= 1)."""
    values = np.asarray(values, dtype=np.int64)
    if values.shape[axis] == 0:
        return np.ones(np.delete(values.shape, axis), dtype=np.int64)
    # x >= 0 needs bit_length(x) + 1; x < 0 needs bit_length(-x - 1) + 1.
    mag = np.where(values < 0, -values - 1, values)
    top = mag.max(axis=axis)
    return bit_length(top) + 1


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
