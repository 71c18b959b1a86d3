"""Frame layout version 1: packing and parsing whole batches of frames.

The layout is written down bit by bit in ``FRAME_LAYOUT.md`` beside this file;
:data:`HEADER_FIELDS` is the same table as data, and both the vectorized packer
here and the bitstring reference packer (:func:`pack_frame_reference`) are
driven by it.

A frame::

    sync(16) | version(4) flags(4) length(16) profile(16) channel(8)
    sequence(16) basis(8) step_code(10) terms(13) value_width(6)
    mean_width(6) valid(13) | mean(mean_width) | terms x [index(ib), value(value_width)]
    | zero padding to a byte | crc(16)

All fields are unsigned and MSB first except ``mean`` and ``value``, which are
two's complement.  ``ib`` is the number of bits that index a term of a frame of
N samples, ``max(1, ceil(log2 N))``.  The CRC is CRC-16/IBM-3740 over every
byte after the sync marker up to the CRC itself.
"""

from __future__ import annotations

from dataclasses import dataclass

import bitstring
import numpy as np

from ._bits import MAX_FIELD_BITS, from_twos, pack_fields, read_fields, signed_width, to_twos
from ._crc import crc16_ibm3740

__all__ = [
    "LAYOUT_VERSION",
    "SYNC",
    "GAP_KIND",
    "FLAG_GAP_MASK",
    "HEADER_FIELDS",
    "HEADER_BYTES",
    "FrameBatch",
    "index_bits",
    "pack_frames",
    "parse_headers",
    "parse_payloads",
    "pack_frame_reference",
    "unpack_frame_reference",
    "frame_extent",
    "frame_crc_ok",
]

LAYOUT_VERSION = 1
SYNC = b"\xe3\x5a"
#: Version nibble of the gap-mask frame kind (layout in ``_gaps.py``), valid beside any version.
GAP_KIND = 15
#: Flag bit of a data frame whose samples have a gap mask in a frame of kind GAP_KIND.
FLAG_GAP_MASK = 1

#: (field, bits, meaning) after the sync marker, in order.
HEADER_FIELDS: tuple[tuple[str, int, str], ...] = (
    ("version", 4, "frame layout version (1)"),
    ("flags", 4, "bit 0 (value 1): a gap-mask frame for this window and channel exists "
     "(codec/_gaps.py); bits 1-3 reserved, 0"),
    ("length", 16, "bytes in the whole frame, sync marker to CRC"),
    ("profile", 16, "profile identifier (first 16 bits of SHA-256 of its canonical form)"),
    ("channel", 8, "channel index in the profile"),
    ("sequence", 16, "time-window index modulo 65536"),
    ("basis", 8, "basis code"),
    ("step_code", 10, "quantizer step code: step = 2**((code - 512) / 8)"),
    ("terms", 13, "number of kept terms (0..N)"),
    ("value_width", 6, "bits per kept term's value (two's complement), 0 when no terms"),
    ("mean_width", 6, "bits of the frame mean (two's complement); 0 = no mean (reference 'total')"),
    ("valid", 13, "samples of this frame that are real data (N except a short last frame)"),
)
_HEADER_BITS = sum(b for _, b, _ in HEADER_FIELDS)
assert _HEADER_BITS % 8 == 0
#: Bytes from the start of the frame to the end of the fixed header.
HEADER_BYTES = len(SYNC) + _HEADER_BITS // 8
CRC_BYTES = 2


def frame_extent(mv: memoryview, pos: int) -> int | None:
    """Length in bytes claimed by the frame whose sync marker is at ``pos``.

    This is the envelope rule a receiver uses before it trusts anything else:
    None when the bytes cannot start a frame of a layout version we know (too
    short to hold a header, unknown version, impossible length).  Later layout
    versions add their own rule here, so stream search never depends on how a
    payload is coded.
    """
    if pos + HEADER_BYTES > len(mv) or mv[pos : pos + len(SYNC)] != SYNC:
        return None
    version = mv[pos + len(SYNC)] >> 4
    if version not in (LAYOUT_VERSION, GAP_KIND):
        return None
    length = int.from_bytes(mv[pos + 3 : pos + 5], "big")
    return length if length >= HEADER_BYTES + CRC_BYTES else None


def frame_crc_ok(mv: memoryview, pos: int, length: int) -> bool:
    """Whether the frame at ``pos`` of ``length`` bytes passes its CRC."""
    end = pos + length
    if end > len(mv):
        return False
    return crc16_ibm3740(mv[pos + len(SYNC) : end - CRC_BYTES]) == int.from_bytes(
        mv[end - CRC_BYTES : end], "big")


def index_bits(n: int) -> int:
    """Bits that index one of ``n`` terms."""
    return max(1, int(n - 1).bit_length())


@dataclass
class FrameBatch:
    """Many frames as parallel arrays (one entry per frame) plus flat term arrays.

    ``term_index`` and ``term_value`` hold the kept terms of all frames in
    frame order; ``terms[f]`` of them belong to frame ``f``.  ``mean`` is
    ignored where ``has_mean`` is False.
    """

    channel: np.ndarray
    sequence: np.ndarray
    basis: np.ndarray
    step_code: np.ndarray
    valid: np.ndarray
    has_mean: bool
    mean: np.ndarray
    terms: np.ndarray
    term_index: np.ndarray
    term_value: np.ndarray
    #: Header flags per frame (FLAG_GAP_MASK); None means all zero.
    flags: np.ndarray | None = None

    def __len__(self) -> int:
        return int(self.channel.size)


def pack_frames(batch: FrameBatch, profile_id: int, n: int) -> tuple[bytes, np.ndarray]:
    """Pack every frame of ``batch``; return the bytes and each frame's byte length."""
    nf = len(batch)
    ib = index_bits(n)
    terms = batch.terms.astype(np.int64)
    starts = np.cumsum(terms) - terms
    vwidth = np.zeros(nf, dtype=np.int64)
    if batch.term_value.size:
        nz = terms > 0
        per_term = signed_width(batch.term_value[:, None])
        vwidth[nz] = np.maximum.reduceat(per_term, starts[nz])
    mwidth = signed_width(batch.mean[:, None]) if batch.has_mean else np.zeros(nf, np.int64)
    if max(vwidth.max(initial=0), mwidth.max(initial=0)) > MAX_FIELD_BITS:
        raise ValueError("a coefficient needs more bits than the layout allows")  # our bug
    payload_bits = mwidth + terms * (ib + vwidth)
    pad = (-payload_bits) % 8
    body_bytes = (_HEADER_BITS + payload_bits + pad) // 8
    length = len(SYNC) + body_bytes + CRC_BYTES

    header = np.stack(
        [np.full(nf, LAYOUT_VERSION), np.zeros(nf) if batch.flags is None else batch.flags,
         length, np.full(nf, profile_id),
         batch.channel, batch.sequence % 65536, batch.basis, batch.step_code, terms,
         vwidth, mwidth, batch.valid]
    ).T.astype(np.int64)
    nh = len(HEADER_FIELDS)
    per_frame = nh + 1 + 2 * terms + 1
    fstart = np.cumsum(per_frame) - per_frame
    values = np.zeros(int(per_frame.sum()), dtype=np.uint64)
    widths = np.zeros(values.size, dtype=np.int64)
    hpos = fstart[:, None] + np.arange(nh)
    values[hpos] = header
    widths[hpos] = np.array([b for _, b, _ in HEADER_FIELDS])
    values[fstart + nh] = to_twos(batch.mean, mwidth) if batch.has_mean else 0
    widths[fstart + nh] = mwidth
    owner = np.repeat(np.arange(nf), terms)
    j = np.arange(terms.sum()) - starts[owner]
    ipos = fstart[owner] + nh + 1 + 2 * j
    values[ipos] = batch.term_index
    widths[ipos] = ib
    values[ipos + 1] = to_twos(batch.term_value, vwidth[owner])
    widths[ipos + 1] = vwidth[owner]
    widths[fstart + per_frame - 1] = pad
    body = pack_fields(values, widths)

    out = np.empty(int(length.sum()), dtype=np.uint8)
    ostart = np.cumsum(length) - length
    bstart = np.cumsum(body_bytes) - body_bytes
    dest = np.repeat(ostart + len(SYNC) - bstart, body_bytes) + np.arange(body.size)
    out[dest] = body
    out[ostart[:, None] + np.arange(len(SYNC))] = np.frombuffer(SYNC, np.uint8)
    mv = memoryview(body)
    crc = np.fromiter(
        (crc16_ibm3740(mv[s : s + b]) for s, b in zip(bstart.tolist(), body_bytes.tolist())),
        dtype=np.int64, count=nf,
    )
    cpos = ostart + length - CRC_BYTES
    out[cpos] = crc >> 8
    out[cpos + 1] = crc & 0xFF
    return out.tobytes(), length


def parse_headers(buf: np.ndarray, offsets: np.ndarray) -> dict[str, np.ndarray]:
    """Header fields of the frames starting at byte ``offsets`` of ``buf``."""
    widths = np.array([b for _, b, _ in HEADER_FIELDS])
    rel = np.cumsum(widths) - widths + 8 * len(SYNC)
    pos = (offsets.astype(np.int64)[:, None] * 8 + rel).reshape(-1)
    vals = read_fields(buf, pos, np.tile(widths, offsets.size)).reshape(offsets.size, -1)
    return {name: vals[:, i] for i, (name, _, _) in enumerate(HEADER_FIELDS)}


def parse_payloads(
    buf: np.ndarray, offsets: np.ndarray, head: dict[str, np.ndarray], n: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Means, term indices and term values of frames whose headers are checked.

    Returns ``(mean, term_index, term_value)``; terms are flat in frame order.
    """
    ib = index_bits(n)
    terms = head["terms"]
    vw = head["value_width"]
    mw = head["mean_width"]
    base = offsets.astype(np.int64) * 8 + HEADER_BYTES * 8
    mean = from_twos(read_fields(buf, base, mw), mw)
    owner = np.repeat(np.arange(offsets.size), terms)
    j = np.arange(terms.sum()) - (np.cumsum(terms) - terms)[owner]
    tpos = base[owner] + mw[owner] + j * (ib + vw[owner])
    index = read_fields(buf, tpos, np.full(tpos.size, ib))
    value = from_twos(read_fields(buf, tpos + ib, vw[owner]), vw[owner])
    return mean, index, value


def expected_length(head: dict[str, np.ndarray], n: int) -> np.ndarray:
    """Frame length in bytes implied by the header fields (checked against ``length``)."""
    bits = head["mean_width"] + head["terms"] * (index_bits(n) + head["value_width"])
    return len(SYNC) + (_HEADER_BITS + bits + 7) // 8 + CRC_BYTES


def _bitstring_format(mean_width: int, terms: int, ib: int, vw: int, pad: int) -> list[str]:
    fmt = ["bytes:2"] + [f"uint:{b}" for _, b, _ in HEADER_FIELDS]
    if mean_width:
        fmt.append(f"int:{mean_width}")
    fmt += [f"uint:{ib}", f"int:{vw}"] * terms
    if pad:
        fmt.append(f"uint:{pad}")
    return fmt


def pack_frame_reference(fields: dict, mean: int | None, index: list[int], value: list[int],
                         n: int) -> bytes:
    """Pack one frame with bitstring, field by field (reference and documentation path).

    ``fields`` holds the header fields except ``version``, ``flags``, ``length``,
    ``terms``, ``value_width`` and ``mean_width``, which are derived.
    """
    ib = index_bits(n)
    vw = int(signed_width(np.array([value]))[0]) if value else 0
    mw = int(signed_width(np.array([[mean]]))[0]) if mean is not None else 0
    payload = mw + len(index) * (ib + vw)
    pad = (-payload) % 8
    length = HEADER_BYTES + (payload + pad) // 8 + CRC_BYTES
    head = {**fields, "version": LAYOUT_VERSION, "flags": 0, "length": length,
            "terms": len(index), "value_width": vw, "mean_width": mw}
    items = [SYNC] + [head[name] for name, _, _ in HEADER_FIELDS]
    if mw:
        items.append(mean)
    for i, v in zip(index, value):
        items += [i, v]
    if pad:
        items.append(0)
    body = bitstring.pack(",".join(_bitstring_format(mw, len(index), ib, vw, pad)), *items)
    raw = body.tobytes()
    return raw + crc16_ibm3740(raw[len(SYNC):]).to_bytes(2, "big")


def unpack_frame_reference(frame: bytes, n: int) -> tuple[dict, int | None, list[int], list[int]]:
    """Parse one frame with bitstring; the inverse of :func:`pack_frame_reference`."""
    bits = bitstring.Bits(frame)
    if bits[:16].tobytes() != SYNC:
        raise ValueError("no sync marker")
    names = [name for name, _, _ in HEADER_FIELDS]
    values = bits[16:].unpack(",".join(f"uint:{b}" for _, b, _ in HEADER_FIELDS))
    head = dict(zip(names, values))
    mw, vw, terms = head["mean_width"], head["value_width"], head["terms"]
    ib = index_bits(n)
    fmt = _bitstring_format(mw, terms, ib, vw, 0)[1 + len(HEADER_FIELDS):]
    rest = bits[8 * HEADER_BYTES :].unpack(",".join(fmt)) if fmt else []
    mean = rest[0] if mw else None
    pairs = rest[1:] if mw else rest
    index, value = list(pairs[0::2]), list(pairs[1::2])
    crc = bits[-16:].uint
    if crc != crc16_ibm3740(frame[len(SYNC) : -CRC_BYTES]):
        raise ValueError("CRC mismatch")
    return head, mean, index, value
