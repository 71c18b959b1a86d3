"""Frame layout version 1: fixed-width fields, one window of one channel per frame.

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
byte after the sync marker up to the CRC.
"""

from __future__ import annotations

from dataclasses import dataclass

import bitstring
import numpy as np

from ..entropy.bits import (
    MAX_FIELD_BITS,
    from_twos,
    pack_fields,
    read_fields,
    signed_width,
    to_twos,
)
from ..quantize.select import choose_steps
from .crc import crc16_ibm3740
from .envelope import CRC_BYTES, SYNC, FrameKey, wrap_frames
from .fields import header_slots, read_header
from .registry import (
    CodedFrames,
    LengthField,
    PackedFrames,
    ParseContext,
    ParsedFrames,
    Verdicts,
    register_layout,
)

__all__ = [
    "LAYOUT_VERSION",
    "HEADER_FIELDS",
    "HEADER_BYTES",
    "FrameBatch",
    "Layout1",
    "LAYOUT_1",
    "index_bits",
    "pack_frames",
    "parse_headers",
    "parse_payloads",
    "expected_length",
    "pack_frame_reference",
    "unpack_frame_reference",
    "max_frame_bytes_for",
]

LAYOUT_VERSION = 1

#: (field, bits, meaning) after the sync marker, in order.
HEADER_FIELDS: tuple[tuple[str, int, str], ...] = (
    ("version", 4, "frame layout version (1)"),
    ("flags", 4, "reserved, must be 0"),
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


def max_frame_bytes_for(profile, windows: int) -> int:
    """A generous bound on any frame carrying ``windows`` windows of every channel.

    16 bytes per coefficient of every channel and window (a coefficient never
    takes 128 bits in any layout), plus headers.
    """
    return 64 + windows * max(1, len(profile.channels)) * (16 * profile.frame_length + 16)


class _FieldReader:
    """``read(pos, width)`` over a byte array, for :func:`codec.layouts.fields.read_header`."""

    def __init__(self, buf: np.ndarray):
        self.buf = buf

    def read(self, pos: np.ndarray, width: np.ndarray) -> np.ndarray:
        return read_fields(self.buf, pos, width).astype(np.int64)


@dataclass(frozen=True)
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

    def __len__(self) -> int:
        return int(self.channel.size)


def index_bits(n: int) -> int:
    """Bits that index one of ``n`` terms."""
    return max(1, int(n - 1).bit_length())



def pack_frames(batch: FrameBatch, profile_id: int, n: int, *, key: FrameKey
                ) -> tuple[bytes, np.ndarray]:
    """Pack every frame of ``batch``; return the bytes and each frame's byte length.

    ``key`` is the profile's share of the CRC (:class:`FrameKey`).
    """
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

    fields = {"version": LAYOUT_VERSION, "flags": 0, "length": length, "profile": profile_id,
              "channel": batch.channel, "sequence": batch.sequence % 65536, "basis": batch.basis,
              "step_code": batch.step_code, "terms": terms, "value_width": vwidth,
              "mean_width": mwidth, "valid": batch.valid}
    header = np.stack([v for v, _ in header_slots(HEADER_FIELDS, fields, None, nf)], axis=1)
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

    out = wrap_frames(body, body_bytes, key)
    return out.tobytes(), length


def parse_headers(buf: np.ndarray, offsets: np.ndarray) -> dict[str, np.ndarray]:
    """Header fields of the frames starting at byte ``offsets`` of ``buf``."""
    pos = offsets.astype(np.int64) * 8 + 8 * len(SYNC)
    return read_header(_FieldReader(buf), pos, HEADER_FIELDS)[0]


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
                         n: int, key: FrameKey) -> bytes:
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
    crc = crc16_ibm3740(key.prefix(len(raw) + CRC_BYTES) + raw[len(SYNC):])
    return raw + crc.to_bytes(2, "big")


def unpack_frame_reference(frame: bytes, n: int, key: FrameKey
                           ) -> tuple[dict, int | None, list[int], list[int]]:
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
    if crc != crc16_ibm3740(key.prefix(len(frame)) + frame[len(SYNC) : -CRC_BYTES]):
        raise ValueError("CRC mismatch")
    return head, mean, index, value




def term_bits(batch: FrameBatch, n: int) -> int:
    """Bits of the v1 payload that carry terms and the mean (the rest is header)."""
    terms = batch.terms.astype(np.int64)
    vw = np.zeros(terms.size, np.int64)
    if batch.term_value.size:
        starts = np.cumsum(terms) - terms
        nz = terms > 0
        vw[nz] = np.maximum.reduceat(signed_width(batch.term_value[:, None]), starts[nz])
    mw = signed_width(batch.mean[:, None]) if batch.has_mean else np.zeros(terms.size, np.int64)
    return int((mw + terms * (index_bits(n) + vw)).sum())


def _check_headers(h: dict, ctx: ParseContext, v: Verdicts) -> None:
    """Refuse frames whose header fields are impossible under the profile (before any payload)."""
    n, channels, pid = ctx.n, ctx.channels, ctx.profile_id
    v.refuse(h["profile"] != pid, "foreign_profile",
             lambda f: f"made under another profile (id {int(h['profile'][f]):#06x}, "
                       f"not {pid:#06x})")
    v.refuse(h["flags"] != 0, "bad_header", "reserved flags set")
    v.refuse(h["channel"] >= channels, "bad_header",
             f"channel not in the profile ({channels} channels)")
    v.refuse(h["basis"] != ctx.basis_code, "bad_header",
             f"basis code differs from the profile's {ctx.basis_name!r}")
    v.refuse(h["terms"] > n, "bad_header", f"claims more terms than the {n} of a frame")
    v.refuse((h["value_width"] > MAX_FIELD_BITS) | (h["mean_width"] > MAX_FIELD_BITS),
             "bad_header", f"a field width exceeds {MAX_FIELD_BITS} bits")
    v.refuse((h["valid"] < 1) | (h["valid"] > n), "bad_header", f"valid samples outside 1..{n}")
    v.refuse((h["mean_width"] > 0) != ctx.has_mean, "bad_header",
             "mean field does not match the profile's reference")
    # Only now, with terms and widths bounded, is the implied length safe to compute.
    sane = v.ok.copy()
    implied = np.where(sane, expected_length({k: np.where(sane, x, 0) for k, x in h.items()}, n),
                       h["length"])
    v.refuse(implied != h["length"], "bad_header", "length field does not match contents")


class Layout1:
    """Layout 1: fixed-width fields, read and written without any entropy coder.

    The simplest frame to produce or inspect by hand; one window of one
    channel per frame, nearest-integer rounding of the terms.
    """

    version = LAYOUT_VERSION
    sequence_bits = 16
    length_field = LengthField("fixed16", HEADER_BYTES + CRC_BYTES, need=HEADER_BYTES)
    supports_frame_scope = False
    has_trellis = False
    spends_slack = False

    def windows_per_frame(self, profile) -> int:
        return 1

    def max_frame_bytes(self, profile) -> int:
        return max_frame_bytes_for(profile, 1)

    def choose_codes(self, cx, mean, dc, budget, n):
        return choose_steps(cx, mean, dc, budget), np.full(cx.shape[0], 0.5)

    def block_offset(self) -> float:
        return 0.5

    def pack(self, coded: CodedFrames, key: FrameKey) -> PackedFrames:
        q, n = coded.q, coded.n
        kept = q != 0
        has_mean = coded.mean is not None
        batch = FrameBatch(
            channel=coded.channel, sequence=coded.sequence,
            basis=np.full(coded.channel.size, coded.basis_code), step_code=coded.step_code,
            valid=coded.valid, has_mean=has_mean,
            mean=coded.mean if has_mean else np.zeros(coded.channel.size, np.int64),
            terms=kept.sum(axis=1), term_index=np.nonzero(kept)[1], term_value=q[kept])
        data, lengths = pack_frames(batch, coded.profile_id, n, key=key)
        bits = lengths * 8
        return PackedFrames(data, bits, int(bits.sum()) - term_bits(batch, n),
                            np.arange(coded.channel.size))

    def parse(self, data: bytes, offsets: np.ndarray, lengths: np.ndarray,
              ctx: ParseContext) -> ParsedFrames:
        n, nf = ctx.n, offsets.size
        buf = np.frombuffer(data, dtype=np.uint8)
        h = parse_headers(buf, offsets)
        v = Verdicts(nf)
        _check_headers(h, ctx, v)
        q = np.zeros((nf, n), dtype=np.int64)
        mean = np.zeros(nf, np.int64)
        good = np.flatnonzero(v.ok)
        if good.size:
            gh = {k: x[good] for k, x in h.items()}
            m, index, value = parse_payloads(buf, offsets[good], gh, n)
            owner = np.repeat(np.arange(good.size), gh["terms"])
            badidx = np.zeros(good.size, dtype=bool)
            badidx[owner[index >= n]] = True
            v.refuse(badidx, "bad_header", f"a term index is not below the frame length {n}",
                     idx=good)
            ok_t = ~badidx[owner]
            q[good[owner[ok_t]], index[ok_t]] = value[ok_t]
            mean[good] = np.where(gh["mean_width"] > 0, m, 0)
        rows = np.arange(nf)
        return ParsedFrames(
            tuple(v.verdict), tuple(v.detail), h["sequence"], h["valid"], h["terms"],
            h["step_code"], h, rows, np.minimum(h["channel"], 255), np.zeros(nf, np.int64),
            h["valid"], h["step_code"], mean if ctx.has_mean else None, h["terms"],
            np.zeros(nf, dtype=bool), q)


LAYOUT_1 = register_layout(Layout1())
