"""What every forward error correction code offers the link simulator.

A code turns the codec's byte stream into channel bits and back, and counts
every bit it puts on air (parity, padding to a whole block, sync markers,
trellis tail).  A new code subclasses :class:`Code` in its own module, which
imports only this one, and registers in ``link_sim/_fec.py``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Code", "DecodeStats", "as_u8"]


@dataclass
class DecodeStats:
    """What a decoder saw: blocks decoded and blocks it could not correct.

    Attributes
    ----------
    codewords : int
        Blocks (codewords) the decoder worked on.
    codewords_failed : int
        Blocks it found uncorrectable (it passes their bytes on as received).
    extra : dict
        Code-specific counts, e.g. corrected symbols.

    Examples
    --------
    >>> DecodeStats(4, 1).codewords_failed
    1
    """

    codewords: int = 0
    codewords_failed: int = 0
    extra: dict = field(default_factory=dict)


class Code:
    """Interface of an FEC code: ``encode(bytes) -> bits``, ``decode(received, n_bytes)``.

    Attributes
    ----------
    name : str
        The name users give (``--fec``, ``fec =`` in link files).
    rate : float
        Information bits per channel bit of the code itself (no padding).
    soft : bool
        Whether :meth:`decode` wants matched-filter values instead of hard bits.

    Examples
    --------
    >>> from link_sim import make_code
    >>> code = make_code("hamming74")
    >>> isinstance(code, Code), code.channel_bits(4)  # 32 bits in blocks of 4 -> 56 on air
    (True, 56)
    """

    name = "?"
    soft = False  # whether decode wants matched-filter values instead of hard bits

    def encode(self, data) -> np.ndarray:
        """Channel bits (uint8 0/1) for the bytes ``data``, padded to whole blocks."""
        raise NotImplementedError

    def decode(self, received: np.ndarray, n_bytes: int) -> tuple[np.ndarray, DecodeStats]:
        """The first ``n_bytes`` bytes back from channel bits (or soft values)."""
        raise NotImplementedError

    def channel_bits(self, n_bytes: int) -> int:
        """Bits on air for ``n_bytes`` bytes of codec stream, padding included."""
        raise NotImplementedError

    @property
    def rate(self) -> float:
        """Information bits per channel bit of the code itself (no padding)."""
        raise NotImplementedError


def as_u8(data) -> np.ndarray:
    """``data`` as a uint8 array (bytes are viewed, arrays passed through)."""
    return np.frombuffer(bytes(data), np.uint8) if not isinstance(data, np.ndarray) else data
