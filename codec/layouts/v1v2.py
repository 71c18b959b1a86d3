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

import binascii
import hashlib
from dataclasses import dataclass, field

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
from ..entropy.rangecoder import CONTEXT_WINDOW  # also the Rice contexts' window
from ..entropy.rice import exp_golomb_bits
from .crc import crc16_ibm3740, crc16_prefix_states, crc16_span

__all__ = [
    "LAYOUT_VERSION",
    "SYNC",
    "GAP_KIND",
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
    "FrameKey",
    "frame_extents",
    "frames_crc_ok",
    "LAYOUT_VERSION_2",
    "CONTEXT_WINDOW",
    "FrameBatchV2",
    "pack_frames_v2",
    "parse_frames_v2",
    "payload_bits_v2",
    "rice_parameters",
    "wrap_frames",
    "read_subheaders",
    "write_subheaders",
    "subframes_fit",
]

LAYOUT_VERSION = 1
SYNC = b"\xe3\x5a"
#: Version nibble of the gap-mask frame kind (layout in ``gapmask.py``), valid beside any version.
GAP_KIND = 15
_GAP_MIN_BYTES = 14  # its fixed header (12 bytes with the sync marker) and CRC
#: Appended to the profile digest for the key of a gap-mask frame's inner frame.
INNER_KEY_LABEL = b"gap-mask inner frame"

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
CRC_BYTES = 2


def frame_extent(mv: memoryview, pos: int) -> int | None:
    """Length in bytes claimed by the frame whose sync marker is at ``pos``.

    This is the envelope rule a receiver uses before it trusts anything else:
    None when the bytes cannot start a frame of a layout version we know (too
    short to hold a header, unknown version, impossible length).  Version 1
    carries a 16-bit length after the version and flags nibbles; versions 2 and 3 a
    1-bit long flag and an 11-bit (or 27-bit) length after the version nibble.
    Stream search never depends on how a payload is coded.
    """
    if pos + len(SYNC) + 2 > len(mv) or mv[pos : pos + len(SYNC)] != SYNC:
        return None
    b0 = mv[pos + len(SYNC)]
    version = b0 >> 4
    if version == GAP_KIND:  # gap-mask frame: 16-bit length where v1 keeps it
        if pos + 5 > len(mv):
            return None
        length = int.from_bytes(mv[pos + 3 : pos + 5], "big")
        return length if length >= _GAP_MIN_BYTES else None
    if version == LAYOUT_VERSION:
        if pos + HEADER_BYTES > len(mv):
            return None
        length = int.from_bytes(mv[pos + 3 : pos + 5], "big")
        return length if length >= HEADER_BYTES + CRC_BYTES else None
    if version in (LAYOUT_VERSION_2, _LAYOUT_VERSION_3, _LAYOUT_VERSION_4):
        if b0 & 0x08:  # long length field: 27 bits
            if pos + len(SYNC) + 4 > len(mv):
                return None
            length = int.from_bytes(mv[pos + 2 : pos + 6], "big") & ((1 << 27) - 1)
            return length if length >= (1 << SHORT_LENGTH_BITS) else None
        length = int.from_bytes(mv[pos + 2 : pos + 4], "big") & ((1 << 11) - 1)
        return length if length >= (_MIN_V2_BYTES if version == LAYOUT_VERSION_2
                                    else _MIN_V3_BYTES) else None
    return None


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
    _inner: list = field(default_factory=list, compare=False, repr=False)

    def inner(self) -> FrameKey:
        """The key of a data frame carried inside a gap-mask frame.

        Its digest is SHA-256(``digest`` || "gap-mask inner frame"), so an inner
        frame found on its own (its gap-mask frame damaged) fails its CRC: the
        stand-in values under a gap never pass for data.
        """
        if not self._inner:
            self._inner.append(FrameKey(hashlib.sha256(self.digest + INNER_KEY_LABEL).digest()))
        return self._inner[0]

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


def frame_extents(u: np.ndarray, pos: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`frame_extent` of the candidates at byte ``pos`` of ``u`` (sync markers there).

    Returns ``(length, need)``: the claimed length (-1 where
    :func:`frame_extent` gives None) and the bytes from ``pos`` the envelope
    rule read (a candidate nearer the end than that is undecided).  Whole-array.
    """
    pos = np.asarray(pos, dtype=np.int64)
    pad = np.concatenate([u, np.zeros(HEADER_BYTES, np.uint8)]).astype(np.int64)
    b0 = pad[pos + 2]
    version = b0 >> 4
    w16 = (pad[pos + 3] << 8) | pad[pos + 4]
    w27 = ((b0 << 24) | (pad[pos + 3] << 16) | (pad[pos + 4] << 8) | pad[pos + 5]) & (
        (1 << 27) - 1)
    w11 = ((b0 & 7) << 8) | pad[pos + 3]
    longf = (b0 & 0x08) > 0
    v234 = (version == LAYOUT_VERSION_2) | (version == _LAYOUT_VERSION_3) | (
        version == _LAYOUT_VERSION_4)
    need = np.select([version == GAP_KIND, version == LAYOUT_VERSION, v234 & longf],
                     [5, HEADER_BYTES, len(SYNC) + 4], len(SYNC) + 2)
    need = np.maximum(need, len(SYNC) + 2)
    minimum = np.where(version == LAYOUT_VERSION_2, _MIN_V2_BYTES, _MIN_V3_BYTES)
    length = np.select(
        [version == GAP_KIND, version == LAYOUT_VERSION, v234 & longf, v234],
        [np.where(w16 >= _GAP_MIN_BYTES, w16, -1),
         np.where(w16 >= HEADER_BYTES + CRC_BYTES, w16, -1),
         np.where(w27 >= (1 << SHORT_LENGTH_BITS), w27, -1),
         np.where(w11 >= minimum, w11, -1)], -1)
    length = np.where(pos + need <= u.size, length, -1)
    return length, need


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
    # CRC of the implicit prefix (``FrameKey``) then the body: a frame's whole CRC.
    states = crc16_prefix_states(np.ascontiguousarray(body, dtype=np.uint8))
    crc = crc16_span(states, bstart, bstart + body_bytes, key.inits(length)).astype(np.int64)
    cpos = ostart + length - CRC_BYTES
    out[cpos] = crc >> 8
    out[cpos + 1] = crc & 0xFF
    return out


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

    def __len__(self) -> int:
        return int(self.channel.size)


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

    header = np.stack(
        [np.full(nf, LAYOUT_VERSION), np.zeros(nf), length, np.full(nf, profile_id),
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

    out = wrap_frames(body, body_bytes, key)
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


# ---------------------------------------------------------------------------
# Layout version 2: compact header, multi-channel frames, Rice-coded payload.
# Written down bit by bit in FRAME_LAYOUT.md ("Version 2").
# ---------------------------------------------------------------------------

LAYOUT_VERSION_2 = 2
K_INIT_BITS = 5
STEP_BITS = 10
PROFILE_BITS_V2 = 8
SEQUENCE_BITS_V2 = 8
SHORT_LENGTH_BITS = 11
LONG_LENGTH_BITS = 27
#: Smallest possible v2 frame: sync, 2 length bytes, 3 header bytes, CRC.
_MIN_V2_BYTES = len(SYNC) + 2 + 3 + CRC_BYTES
# Versions 3 and 4 (``_layout_v3.py``) have the same envelope as version 2.
_LAYOUT_VERSION_3 = 3
_LAYOUT_VERSION_4 = 4
_MIN_V3_BYTES = len(SYNC) + 4 + CRC_BYTES


def count_bits(n: int) -> int:
    """Bits of the coded-coefficient count, which runs 0..n."""
    return int(n).bit_length()


def rice_parameters(mag: np.ndarray, k_init: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rice parameter and context of every coefficient of every frame (rows).

    Coefficient 0 uses the frame's ``k_init``; coefficient j >= 1 uses the
    LOCO-I rule on ``total``, the sum of the previous ``min(j, CONTEXT_WINDOW)``
    magnitudes.  Returns ``(k, total)`` (``total[:, 0]`` is -1: no context).
    """
    from ..entropy.rice import preceding_sums, rice_k_from_context

    nf, n = mag.shape
    total = preceding_sums(mag, CONTEXT_WINDOW)
    k = np.empty((nf, n), dtype=np.int64)
    k[:, 0] = k_init
    w = min(CONTEXT_WINDOW, n)
    for jj in range(1, w):  # the first few coefficients see a shorter context
        k[:, jj] = rice_k_from_context(total[:, jj - 1], jj)
    k[:, w:] = rice_k_from_context(total[:, w - 1 :], CONTEXT_WINDOW)
    ctx = np.empty((nf, n), dtype=np.int64)
    ctx[:, 0] = -1
    ctx[:, 1:] = total
    return k, ctx


def _runs(run: np.ndarray, nz: np.ndarray):
    """Run-mode runs: (row, first index, exp-Golomb width, r + 1) of each, in stream order.

    A run is a maximal block of run-mode indices; it always ends on a non-zero
    coefficient, so starts and ends pair up in row-major order.
    """
    prev = np.zeros_like(run)
    prev[:, 1:] = run[:, :-1]
    srow, scol = np.nonzero(run & ~prev)
    _, ecol = np.nonzero(run & nz)
    eg = (ecol - scol + 1).astype(np.int64)
    return srow, scol, exp_golomb_bits(eg - 1), eg


def _coding_state(q: np.ndarray, k_init: np.ndarray, last: np.ndarray):
    """Magnitudes, non-zero mask, Rice parameters, in-range mask and run-mode mask."""
    mag = np.abs(q)
    k, ctx = rice_parameters(mag, k_init)
    inside = np.arange(q.shape[1]) < last[:, None]
    return mag, mag > 0, k, inside, (ctx == 0) & inside


def coefficient_bits(q: np.ndarray, k_init: np.ndarray, last: np.ndarray) -> np.ndarray:
    """Bits of the coded coefficients of each subframe (what :func:`coefficient_items` packs)."""
    from ..entropy.rice import rice_escape_bits

    ns = q.shape[0]
    mag, nz, k, inside, run = _coding_state(q, k_init, last)
    srow, _, eg_w, _ = _runs(run, nz)
    m = np.where(run, mag - 1, mag)
    w = rice_escape_bits(np.maximum(m, 0), np.where(run, 0, k)) + nz
    coded = inside & (~run | nz)
    return np.where(coded, w, 0).sum(axis=1) + np.bincount(srow, eg_w, minlength=ns).astype(
        np.int64)


def coefficient_items(q: np.ndarray, k_init: np.ndarray, last: np.ndarray) -> list:
    """The coded coefficients of each subframe as three (value, width) slot pairs per index.

    Regular mode (coefficient 0, or a non-zero context): the magnitude in the
    layout's Rice code with the context's parameter, then a sign bit if it is
    not zero.  Run mode (context sum 0, i.e. the previous CONTEXT_WINDOW
    magnitudes were all zero): at the first such index one exp-Golomb (order 0)
    codeword gives the number r of zeros that follow, and the coefficient r
    places further on, which is not zero, is sent as ``magnitude - 1`` in the
    Rice code with k = 0 and a sign bit.  Run mode follows the run-length
    method of Golomb (1966) and the run mode of LOCO-I / JPEG-LS.

    Returns ``[(run_v, run_w), (main_v, main_w), (extra_v, extra_w)]``, each (rows, n):
    the run codeword at a run's first index; the codeword (whole when it fits
    64 bits, else its unary part) and its remainder, at the index it codes.
    """
    from ..entropy.rice import rice_escape_fields

    ns, n = q.shape
    mag, nz, k, inside, run = _coding_state(q, k_init, last)
    srow, scol, eg_w, eg = _runs(run, nz)
    run_w = np.zeros((ns, n), dtype=np.int64)
    run_v = np.zeros((ns, n), dtype=np.uint64)
    run_w[srow, scol] = eg_w
    run_v[srow, scol] = eg
    coded = inside & (~run | nz)  # regular indices, and the non-zero ending each run
    m = np.where(run, mag - 1, mag)
    kk = np.where(run, 0, k)
    _, uw, lv, lw = rice_escape_fields(np.maximum(m, 0), kk)
    sw = nz.astype(np.int64)
    tail = (lv << sw.astype(np.uint64)) | (q < 0).astype(np.uint64)
    tw = lw + sw
    whole = uw + tw <= 64
    main_v = np.where(whole, (np.uint64(1) << tw.astype(np.uint64)) | tail, np.uint64(1))
    main_w = np.where(coded, np.where(whole, uw + tw, uw), 0)
    extra_v = np.where(whole, np.uint64(0), tail)
    extra_w = np.where(coded & ~whole, tw, 0)
    return [(run_v, run_w), (main_v, main_w), (extra_v, extra_w)]


def initial_parameter(mag0: np.ndarray) -> np.ndarray:
    """``k_init`` the encoder sends: the Rice parameter that codes coefficient 0 shortest."""
    from ..entropy.rice import bit_length as _bit_length

    return np.clip(_bit_length(mag0) - 1, 0, (1 << K_INIT_BITS) - 1)


def payload_bits_v2(q: np.ndarray, mean_int: np.ndarray | None, n: int) -> np.ndarray:
    """Bits of each subframe (rows of ``q``) in layout v2, frame header excluded.

    Exact for a subframe that leads its frame; a later subframe of a
    multi-channel frame sends its step as a difference, usually in fewer bits.
    """
    from ..entropy.rice import zigzag

    nz = q != 0
    last = np.where(nz.any(axis=1), n - np.argmax(nz[:, ::-1], axis=1), 0)
    coef = coefficient_bits(q, initial_parameter(np.abs(q[:, 0])), last)
    bits = STEP_BITS + count_bits(n) + np.where(last > 0, K_INIT_BITS, 0) + coef
    if mean_int is not None:
        bits += exp_golomb_bits(zigzag(mean_int))
    return bits


@dataclass
class FrameBatchV2:
    """Frames of layout v2 as parallel arrays.

    Subframes (one per channel carried) are the rows of ``q``; ``frame`` gives
    each subframe's frame, non-decreasing, so a frame's subframes are
    consecutive rows.  Per frame: ``multi`` (all channels, in profile order),
    ``channel`` (when not multi), ``sequence`` and ``valid``.
    """

    multi: np.ndarray
    channel: np.ndarray
    sequence: np.ndarray
    valid: np.ndarray
    frame: np.ndarray
    step_code: np.ndarray
    mean: np.ndarray | None
    q: np.ndarray

    def __len__(self) -> int:
        return int(self.multi.size)


def pack_frames_v2(batch: FrameBatchV2, profile_id: int, n: int, *, key: FrameKey
                   ) -> tuple[bytes, np.ndarray, np.ndarray]:
    """Pack every frame of ``batch`` in layout v2.

    Returns the bytes, each frame's byte length, each subframe's payload bits
    and, of those, its side-information bits (step, count, k_init).
    """
    from ..entropy.rice import pack_bits

    q = batch.q
    ns = q.shape[0]
    vb = index_bits(n)
    lb = count_bits(n)
    mag = np.abs(q)
    nz = mag > 0
    last = np.where(nz.any(axis=1), n - np.argmax(nz[:, ::-1], axis=1), 0)
    k_init = initial_parameter(mag[:, 0])

    nh, nsub = 9, 5
    items = coefficient_items(q, k_init, last)
    (rv, rw), (mv, mw), (ev, ew) = items
    total_w = rw + mw + ew
    merged = bool((total_w <= 64).all())
    # Usually a coefficient's run codeword, codeword and remainder fit one 64-bit
    # field together: one slot per coefficient instead of three (less to pack).
    per = 1 if merged else 3
    slots = nh + nsub + per * n + 1
    val = np.zeros((ns, slots), dtype=np.uint64)
    wid = np.zeros((ns, slots), dtype=np.int64)
    # subframe header
    s0 = nh
    # The first subframe of a frame sends its step code in 10 bits; the others
    # send the change from the previous subframe's code, exp-Golomb order 0 of
    # its zigzag (channels of one window usually have similar steps).
    lead = np.r_[True, batch.frame[1:] != batch.frame[:-1]]
    write_subheaders(val, wid, s0, lead, batch.step_code, batch.mean, last, lb)
    val[:, s0 + 4] = k_init
    wid[:, s0 + 4] = np.where(last > 0, K_INIT_BITS, 0)
    c0 = nh + nsub
    if merged:
        zero = np.uint64(0)
        comb = np.where(ew > 0, ev, zero)
        comb |= np.where(mw > 0, mv << np.where(mw > 0, ew, 0).astype(np.uint64), zero)
        comb |= np.where(rw > 0, rv << np.where(rw > 0, mw + ew, 0).astype(np.uint64), zero)
        val[:, c0 : c0 + n] = comb
        wid[:, c0 : c0 + n] = total_w
    else:
        for i, (v, w) in enumerate(items):
            val[:, c0 + i : c0 + 3 * n : 3] = np.where(w > 0, v, np.uint64(0))
            wid[:, c0 + i : c0 + 3 * n : 3] = w
    sub_bits = wid.sum(axis=1)
    side_bits = wid[:, s0] + wid[:, s0 + 3] + wid[:, s0 + 4]  # step, count, k_init

    # frame header (in the first subframe row of each frame)
    first = np.flatnonzero(np.r_[True, batch.frame[1:] != batch.frame[:-1]])
    lastrow = np.r_[first[1:] - 1, ns - 1]
    short = batch.valid < n
    multi = batch.multi.astype(bool)
    head_bits = 4 + 1 + 8 + 8 + 1 + np.where(multi, 0, 8) + 1 + np.where(short, vb, 0)
    payload = np.add.reduceat(sub_bits, first)
    long, bits, body_bytes, length = size_length_fields(head_bits + payload, 0)
    head = [(LAYOUT_VERSION_2, 4), (long, 1), (length, np.where(long, LONG_LENGTH_BITS,
            SHORT_LENGTH_BITS)), (profile_id & 0xFF, 8), (batch.sequence % 256, 8),
            (multi, 1), (np.where(multi, 0, batch.channel), np.where(multi, 0, 8)),
            (short, 1), (np.where(short, batch.valid - 1, 0), np.where(short, vb, 0))]
    write_frame_heads(val, wid, first, lastrow, head, body_bytes * 8 - bits)
    body = pack_bits(val.ravel(), wid.ravel())

    out = wrap_frames(body, body_bytes, key)
    return out.tobytes(), length, sub_bits, side_bits


def read_frame_start(r, offsets: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Length, profile byte and sequence of frames of layouts 2 to 4 at byte ``offsets``.

    Returns them and the bit position after the sequence field.
    """
    p = offsets.astype(np.int64) * 8 + 8 * len(SYNC) + 4
    long = r.read(p, 1)
    lw = np.where(long, LONG_LENGTH_BITS, SHORT_LENGTH_BITS)
    length = r.read(p + 1, lw)
    p = p + 1 + lw
    return length, r.read(p, 8), r.read(p + 8, 8), p + 16


def size_length_fields(bits: np.ndarray, extra_bytes: np.ndarray | int
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Length field of layouts 2 to 4 for frames of ``bits`` bit-packed header bits.

    ``bits`` counts every bit-packed field but the length field; ``extra_bytes``
    follow them (layouts 3 and 4: the range-coded bytes).  A frame takes the
    11-bit length unless its length reaches 2**11 bytes, then the 27-bit one.
    Returns (long flag, packed bits with the length field, packed bytes after
    the sync marker before ``extra_bytes``, whole frame length in bytes).
    """
    bits = bits + SHORT_LENGTH_BITS
    length = len(SYNC) + (bits + 7) // 8 + extra_bytes + CRC_BYTES
    long = length >= (1 << SHORT_LENGTH_BITS)
    bits = np.where(long, bits + LONG_LENGTH_BITS - SHORT_LENGTH_BITS, bits)
    head_bytes = (bits + 7) // 8
    length = len(SYNC) + head_bytes + extra_bytes + CRC_BYTES
    if (length >= (1 << LONG_LENGTH_BITS)).any():
        raise ValueError("a frame is too long for its length field")  # our bug: n is bounded
    return long, bits, head_bytes, length


def write_frame_heads(val: np.ndarray, wid: np.ndarray, first: np.ndarray, lastrow: np.ndarray,
                      head: list, padding: np.ndarray) -> None:
    """Each frame's header fields in its first row's leading slots, its padding last.

    ``head`` holds (value, width) pairs per frame; ``padding`` (zero bits to
    the next byte) goes in the last slot of the frame's last row (layouts 2 to 4).
    """
    for i, (v, w) in enumerate(head):
        val[first, i] = np.broadcast_to(v, (first.size,))
        wid[first, i] = np.broadcast_to(w, (first.size,))
    wid[lastrow, wid.shape[1] - 1] = padding


def write_subheaders(val: np.ndarray, wid: np.ndarray, col: int, lead: np.ndarray,
                     step_code: np.ndarray, mean: np.ndarray | None, count: np.ndarray,
                     lb: int, quantizer: np.ndarray | None = None) -> None:
    """Fill the subframe-header slots from column ``col`` (layouts 2 to 4).

    The inverse of :func:`read_subheaders`: a frame's first subframe (``lead``)
    sends its step code in full, later ones the exp-Golomb code of the zigzag
    difference from the previous subframe's; then the zigzag exp-Golomb mean
    (prefix zeros and codeword in two slots, when a mean is sent) and the term
    count in ``lb`` bits; layout 4 adds a fifth slot, the quantizer bit
    (``quantizer``: 1 = dependent quantization).
    """
    from ..entropy.rice import bit_length, zigzag

    dz = zigzag(np.diff(step_code, prepend=0)) + 1
    val[:, col] = np.where(lead, step_code, dz)
    wid[:, col] = np.where(lead, STEP_BITS, exp_golomb_bits(dz - 1))
    if mean is not None:
        zz = zigzag(mean) + 1  # exp-Golomb order 0 of zigzag(mean)
        nb = bit_length(zz)
        wid[:, col + 1] = nb - 1
        val[:, col + 2] = zz.astype(np.uint64)
        wid[:, col + 2] = nb
    val[:, col + 3] = count
    wid[:, col + 3] = lb
    if quantizer is not None:
        val[:, col + 4] = quantizer
        wid[:, col + 4] = 1


def read_subheaders(r, pp: np.ndarray, rows: np.ndarray, s: int, step: np.ndarray,
                    mean: np.ndarray | None, count: np.ndarray, lb: int, n: int,
                    quantizer: np.ndarray | None = None, mean_pred: np.ndarray | None = None,
                    count_pred: np.ndarray | None = None, prev: np.ndarray | None = None
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Read subframe ``s`` of each frame (layouts 2 to 4): step, mean, term count.

    The first subframe sends its step code whole, later ones as an exp-Golomb
    difference from the previous subframe's; the mean (when sent) is a
    zig-zag exp-Golomb code; the count has ``lb`` bits.  Layouts 3 and 4 may
    send, at rows with ``mean_pred`` / ``count_pred``, the mean / count as the
    zig-zag exp-Golomb change from row ``prev`` (the same channel's previous
    window in the frame).  Fills ``step``, ``mean`` and ``count`` (and layout
    4's ``quantizer`` bit) at ``rows``; returns the bit positions after them
    and which frames hold an impossible value (refused by the decoder).
    """
    from ..entropy.rice import unzigzag

    bad = np.zeros(pp.size, dtype=bool)
    if s == 0:
        step[rows] = r.read(pp, STEP_BITS)
        pp = pp + STEP_BITS
    else:
        v, used = r.exp_golomb(pp)
        code = step[rows - 1] + unzigzag(v)
        bad |= (code < 0) | (code >= (1 << STEP_BITS))
        step[rows] = np.clip(code, 0, (1 << STEP_BITS) - 1)
        pp = pp + used
    if mean is not None:
        v, used = r.exp_golomb(pp)
        mean[rows] = unzigzag(v) + (0 if mean_pred is None
                                    else np.where(mean_pred, mean[prev], 0))
        pp = pp + used
    c = r.read(pp, lb)
    width = np.full(pp.size, lb)
    ci = np.flatnonzero(count_pred) if count_pred is not None else np.zeros(0, np.int64)
    if ci.size:
        v, width[ci] = r.exp_golomb(pp[ci])
        c[ci] = count[prev[ci]] + unzigzag(v)
    bad |= (c < 0) | (c > n)
    count[rows] = np.clip(c, 0, n)
    pp = pp + width
    if quantizer is not None:  # layout 4
        quantizer[rows] = r.read(pp, 1)
        pp = pp + 1
    return pp, bad


def subframes_fit(cnt: np.ndarray, head_bits: np.ndarray, lengths: np.ndarray, n: int,
                  has_mean: bool, quantizer_bit: bool = False,
                  count_change: np.ndarray | None = None) -> np.ndarray:
    """Whether each frame's bytes can hold the ``cnt`` subframe headers it claims (layouts 2-4).

    A subframe header takes at least its step (10 bits for the first, a 1-bit
    exp-Golomb code for the others), a 1-bit mean code (reference ``ac``),
    the count (``count_bits(n)``, or for a later subframe of a frame with
    ``count_change`` set a 1-bit exp-Golomb change) and layout 4's quantizer
    bit.  ``head_bits`` are the bits the frame header took from the sync
    marker on.  Checked before a parser allocates any row, so a short frame
    claiming 16 windows of every channel costs no more than its length.
    """
    fixed = int(has_mean) + int(quantizer_bit)
    later_count = (count_bits(n) if count_change is None
                   else np.where(count_change, 1, count_bits(n)))
    need = np.where(cnt > 0, STEP_BITS + fixed + count_bits(n)
                    + (cnt - 1) * (1 + fixed + later_count), 0)
    room = (np.asarray(lengths, np.int64) - CRC_BYTES) * 8 - head_bits
    return need <= room


def parse_frames_v2(data: bytes, offsets: np.ndarray, lengths: np.ndarray, n: int,
                    channels: int, has_mean: bool) -> dict[str, np.ndarray]:
    """Parse CRC-checked v2 frames at ``offsets`` into per-subframe arrays.

    Returns a dict with per-frame ``profile``, ``sequence``, ``multi``,
    ``valid``, ``length``, ``consumed_ok`` and per-subframe ``frame``,
    ``channel``, ``step_code``, ``mean`` (or None), ``count``, ``q`` (rows of n).
    ``consumed_ok`` is False for a frame whose contents do not fill its length
    exactly (to the byte), which the decoder refuses.
    """
    from ..entropy.rice import BitReader

    r = BitReader(data)
    nf = offsets.size
    vb = index_bits(n)
    lb = count_bits(n)
    length, profile, sequence, p = read_frame_start(r, offsets)
    multi = r.read(p, 1).astype(bool)
    p = p + 1
    channel = r.read(p, np.where(multi, 0, 8))
    p = p + np.where(multi, 0, 8)
    short = r.read(p, 1).astype(bool)
    valid = np.where(short, r.read(p + 1, np.where(short, vb, 0)) + 1, n)
    p = p + 1 + np.where(short, vb, 0)

    cnt = np.where(multi, channels, 1)
    fits = subframes_fit(cnt, p - offsets.astype(np.int64) * 8, lengths, n, has_mean)
    cnt = np.where(fits, cnt, 0)  # refused before any row is allocated
    ns = int(cnt.sum())
    sstart = np.cumsum(cnt) - cnt
    owner = np.repeat(np.arange(nf), cnt)
    slot = np.arange(ns) - sstart[owner]
    sub_channel = np.where(multi[owner], slot, channel[owner])
    step = np.zeros(ns, np.int64)
    mean = np.zeros(ns, np.int64) if has_mean else None
    count = np.zeros(ns, np.int64)
    q = np.zeros((ns, n), dtype=np.int64)
    ok = fits.copy()
    for s in range(int(cnt.max(initial=0))):
        fr = np.flatnonzero(cnt > s)
        rows = sstart[fr] + s
        pp, bad = read_subheaders(r, p[fr], rows, s, step, mean, count, lb, n)
        ok[fr] &= ~bad
        c = count[rows]
        bad = np.zeros(fr.size, dtype=bool)
        kk = r.read(pp, np.where(c > 0, K_INIT_BITS, 0))
        pp = pp + np.where(c > 0, K_INIT_BITS, 0)
        # Coefficients: one vectorized step per coefficient index over all frames.
        qv, pp, bad_c = _read_coefficients(r, pp, c, kk, n)
        q[rows] = qv
        bad |= bad_c
        ok[fr] &= ~bad
        p[fr] = pp
    end_bytes = (p - offsets * 8 + 7) // 8 + CRC_BYTES
    ok &= (end_bytes == lengths) & (length == lengths)
    return {"profile": profile, "sequence": sequence, "multi": multi, "valid": valid,
            "length": length, "consumed_ok": ok, "frame": owner, "channel": sub_channel,
            "step_code": step, "mean": mean, "count": count, "q": q}


def _read_coefficients(r, pos: np.ndarray, count: np.ndarray, k_init: np.ndarray, n: int
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Read the coded coefficients (indices below ``count``) of subframes starting at ``pos``.

    The inverse of :func:`coefficient_items`.  One vectorized step per
    codeword over every subframe still reading, each at its own coefficient
    index: one 64-bit gather gives the unary part, low bits and sign of a
    codeword of up to 57 bits; longer codewords and escapes take the general
    path.  Returns ``(q, end positions, malformed)``.
    """
    from ..entropy.rice import bit_length as _bit_length
    from ..entropy.rice import rice_k_from_context

    m = pos.size
    w1 = n + 1
    mag = np.zeros(m * w1, dtype=np.int64)  # rows of n + 1: column n absorbs bad run targets
    neg = np.zeros(m * w1, dtype=bool)
    bad = np.zeros(m, dtype=bool)
    pos = pos.copy()
    rows = np.arange(m)  # subframes still reading (compacted as they finish)
    p, cnt, jf, k0 = pos.copy(), count.copy(), np.zeros(m, np.int64), k_init
    # the last CONTEXT_WINDOW magnitudes of each subframe, most recent first
    hist = np.zeros((CONTEXT_WINDOW, m), dtype=np.int64)
    words = r._words
    limit = r.size_bits
    while True:
        act = jf < cnt
        if not act.any():
            break
        if act.sum() * 2 < rows.size:  # compact: drop finished subframes
            pos[rows] = p
            rows, p, cnt, jf, k0 = rows[act], p[act], cnt[act], jf[act], k0[act]
            hist, act = hist[:, act], act[act]
        tot = hist.sum(axis=0)
        have = np.minimum(jf, CONTEXT_WINDOW)
        if (have == CONTEXT_WINDOW).all():
            k = rice_k_from_context(tot, CONTEXT_WINDOW)
        else:
            k = np.where(jf == 0, k0, rice_k_from_context(tot, np.maximum(have, 1)))
        runm = act & (jf >= 1) & (tot == 0)
        p2 = p
        run = 0
        if runm.any():
            ri = np.flatnonzero(runm)
            v, used = r.exp_golomb(p[ri])
            run = np.zeros(rows.size, np.int64)
            run[ri] = v
            p2 = p.copy()
            p2[ri] += used
            k = k.copy()
            k[ri] = 0
        pc = np.minimum(p2, limit)
        w = words[pc >> 3] << (pc & 7).astype(np.uint64)
        qq = 33 - _bit_length((w >> np.uint64(31)).astype(np.int64))
        ku = k.astype(np.uint64)
        low = ((w << (qq + 1).astype(np.uint64)) >> np.uint64(1)) >> (63 - ku)
        mg = (qq << k) | low.astype(np.int64)
        sign = (w << ((qq + 1 + k).astype(np.uint64) % np.uint64(64))) >> np.uint64(63)
        used = qq + 1 + k
        slow = act & ((qq >= 32) | (qq + k + 2 > 57))
        if slow.any():
            sl = np.flatnonzero(slow)
            mv, uv = r.rice_escape(p2[sl], k[sl])
            bad[rows[sl[mv < 0]]] = True
            mv = np.maximum(mv, 0)
            mg[sl] = mv
            used[sl] = uv
            sign[sl] = r.read(p2[sl] + uv, 1).astype(np.uint64)
        mg = mg + runm  # a run ends on a non-zero coefficient, sent as magnitude - 1
        nz = mg > 0
        target = jf + run
        over = act & (target >= cnt)
        if over.any():
            bad[rows[over]] = True
        target = np.where(act & ~over, target, n)
        flat = rows * w1 + target
        mag[flat] = np.where(act, mg, 0)
        neg[flat] = (sign == 1) & nz & act
        p = np.where(act, p2 + used + nz, p)
        jf = np.where(act, np.where(over, cnt, target + 1), jf)
        # context: a regular step shifts the history; a run leaves (m, 0, 0, 0)
        shifted = np.empty_like(hist)
        shifted[1:] = hist[:-1]
        shifted[0] = mg
        shifted[1:, runm] = 0
        hist = np.where(act, shifted, hist)
    pos[rows] = p
    mag, neg = mag.reshape(m, w1)[:, :n], neg.reshape(m, w1)[:, :n]
    return np.where(neg, -mag, mag), pos, bad
