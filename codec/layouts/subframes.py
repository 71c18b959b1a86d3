"""What layouts 2 to 4 share: the flagged length field, subframe headers and the frame checks.

A frame of these layouts is a frame header (a field table in each layout's
module, read and written by :mod:`codec.layouts.fields`), then one subframe
header per window of each channel it carries, then the coded coefficients.
Written down in ``FRAME_LAYOUT.md`` ("Version 2", "Version 3").
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..entropy.rice import exp_golomb_bits
from ..quantize.steps import STEP_CODE_BITS as STEP_BITS  # one step-code width
from .envelope import CRC_BYTES, LONG_LENGTH_BITS, SHORT_LENGTH_BITS, SYNC
from .registry import ParseContext, ParsedFrames, Verdicts

__all__ = [
    "STEP_BITS",
    "PROFILE_BITS",
    "count_bits",
    "length_width",
    "size_length_fields",
    "write_frame_heads",
    "write_subheaders",
    "read_subheaders",
    "subframes_fit",
    "refuse_foreign",
    "refuse_contents",
    "parsed_frames",
    "parse_checked",
]

#: Bits of the profile field: the low byte of the 16-bit profile identifier.
PROFILE_BITS = 8


def count_bits(n: int) -> int:
    """Bits of the coded-coefficient count, which runs 0..n."""
    return int(n).bit_length()


def length_width(h, ctx) -> np.ndarray:
    """Width of the length field of a frame header table: 11 bits, 27 with the long flag."""
    return np.where(h["long"], LONG_LENGTH_BITS, SHORT_LENGTH_BITS)


def refuse_foreign(buf: np.ndarray, offsets: np.ndarray, ctx: ParseContext, v: Verdicts) -> None:
    """Refuse frames whose profile byte is not the profile's, before anything else is read.

    The profile byte sits at byte 4 (11-bit length) or 6 (27-bit length).
    """
    pid8 = ctx.profile_id & ((1 << PROFILE_BITS) - 1)
    pbyte = buf[offsets + np.where(buf[offsets + len(SYNC)] & 0x08, 6, 4)]
    v.refuse(pbyte != pid8, "foreign_profile",
             lambda f: f"made under another profile (id byte {int(pbyte[f]):#04x}, "
                       f"not {pid8:#04x})")


def refuse_contents(v: Verdicts, valid: np.ndarray, owner: np.ndarray, channel: np.ndarray,
                    consumed_ok: np.ndarray, ctx: ParseContext) -> None:
    """The checks after parsing: valid samples, channels, and contents filling the length."""
    n, channels = ctx.n, ctx.channels
    v.refuse(valid > n, "bad_header", f"valid samples outside 1..{n}")
    bad_ch = np.zeros(valid.size, dtype=bool)
    np.logical_or.at(bad_ch, owner, channel >= channels)
    v.refuse(bad_ch, "bad_header", f"channel not in the profile ({channels} channels)")
    v.refuse(~consumed_ok, "bad_header", "contents do not fill the length field exactly")


def size_length_fields(bits: np.ndarray, extra_bytes: np.ndarray | int,
                       widen: np.ndarray | int = 1
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Length field of layouts 2 to 7 for frames of ``bits`` bit-packed header bits.

    ``bits`` counts every bit-packed field but the length field; ``extra_bytes``
    follow them (layouts 3 to 7: the range-coded bytes).  A frame takes the
    11-bit length unless its length reaches 2**11 bytes, then the 27-bit one;
    ``widen`` fields take that width (the length field, and layout 7's string
    lengths, counted in ``bits`` at 11 bits).
    Returns (long flag, packed bits with the length field, packed bytes after
    the sync marker before ``extra_bytes``, whole frame length in bytes).
    """
    bits = bits + SHORT_LENGTH_BITS
    length = len(SYNC) + (bits + 7) // 8 + extra_bytes + CRC_BYTES
    long = length >= (1 << SHORT_LENGTH_BITS)
    bits = np.where(long, bits + (LONG_LENGTH_BITS - SHORT_LENGTH_BITS) * widen, bits)
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
    from ..entropy.bits import bit_length
    from ..entropy.rice import zigzag

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
                    count_pred: np.ndarray | None = None, prev: np.ndarray | None = None,
                    step_same: np.ndarray | None = None, mean_order: np.ndarray | None = None,
                    terms_lead: np.ndarray | None = None, terms: np.ndarray | None = None
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Read subframe ``s`` of each frame (layouts 2 to 5): step, mean, term count.

    The first subframe sends its step code whole, later ones as an exp-Golomb
    difference from the previous subframe's; the mean (when sent) is a
    zig-zag exp-Golomb code; the count has ``lb`` bits.  Layouts 3 and 4 may
    send, at rows with ``mean_pred`` / ``count_pred``, the mean / count as the
    zig-zag exp-Golomb change from row ``prev`` (the same channel's previous
    window in the frame); layout 5 sends no step at rows with ``step_same``
    (the step of row ``prev``) and its mean fields as exp-Golomb codes of
    order ``mean_order`` (per row).  Layout 7 reads, at rows with
    ``terms_lead`` (a channel's first subframe in the frame), a flag bit before
    the count into ``terms`` (later rows repeat row ``prev``'s); a flagged row
    has no count field and codes all ``n`` coefficients.  Fills ``step``,
    ``mean`` and ``count`` (and layout 4's ``quantizer`` bit) at ``rows``;
    returns the bit positions after them and which frames hold an impossible
    value (refused by the decoder).
    """
    from ..entropy.rice import read_exp_golomb, unzigzag

    bad = np.zeros(pp.size, dtype=bool)
    if s == 0:
        step[rows] = r.read(pp, STEP_BITS)
        pp = pp + STEP_BITS
    else:
        rd = np.arange(rows.size) if step_same is None else np.flatnonzero(~step_same)
        v, used = read_exp_golomb(r, pp[rd])
        code = step[rows[rd] - 1] + unzigzag(v)
        bad[rd] |= (code < 0) | (code >= (1 << STEP_BITS))
        step[rows[rd]] = np.clip(code, 0, (1 << STEP_BITS) - 1)
        pp = pp.copy()
        pp[rd] += used
        if step_same is not None:  # layout 5: the channel's previous window's step, no field
            same = np.flatnonzero(step_same)
            step[rows[same]] = step[prev[same]]
    if mean is not None:
        v, used = read_exp_golomb(r, pp)
        if mean_order is not None:  # layout 5: then the k low bits
            v = (v << mean_order) | r.read(pp + used, mean_order)
            used = used + mean_order
        mean[rows] = unzigzag(v) + (0 if mean_pred is None
                                    else np.where(mean_pred, mean[prev], 0))
        pp = pp + used
    if terms is not None:  # layout 7: the channel's flag, then no count where it is set
        lead = np.flatnonzero(terms_lead)
        pp = pp.copy()
        terms[rows[lead]] = r.read(pp[lead], 1) > 0
        pp[lead] += 1
        back = np.flatnonzero(~terms_lead)
        terms[rows[back]] = terms[prev[back]]
        lb = np.where(terms[rows], 0, lb)
        if count_pred is not None:
            count_pred = count_pred & ~terms[rows]
    c = r.read(pp, lb)
    width = np.broadcast_to(np.asarray(lb), pp.shape).copy()
    ci = np.flatnonzero(count_pred) if count_pred is not None else np.zeros(0, np.int64)
    if ci.size:
        v, width[ci] = read_exp_golomb(r, pp[ci])
        c[ci] = count[prev[ci]] + unzigzag(v)
    bad |= (c < 0) | (c > n)
    count[rows] = np.clip(c, 0, n)
    if terms is not None:
        count[rows[terms[rows]]] = n
    pp = pp + width
    if quantizer is not None:  # layout 4
        quantizer[rows] = r.read(pp, 1)
        pp = pp + 1
    return pp, bad


def subframes_fit(cnt: np.ndarray, head_bits: np.ndarray, lengths: np.ndarray, n: int,
                  has_mean: bool, quantizer_bit: bool = False,
                  count_change: np.ndarray | None = None,
                  one_step: np.ndarray | None = None,
                  terms_bit: bool = False) -> np.ndarray:
    """Whether each frame's bytes can hold the ``cnt`` subframe headers it claims (layouts 2-5).

    A subframe header takes at least its step (10 bits for the first, a 1-bit
    exp-Golomb code for the others, none for the later ones of a layout-5
    frame with ``one_step``), a 1-bit mean code (reference ``ac``), the count
    (``count_bits(n)``, or for a later subframe of a frame with
    ``count_change`` set a 1-bit exp-Golomb change) and layout 4's quantizer
    bit.  ``head_bits`` are the bits the frame header took from the sync
    marker on.  Checked before a parser allocates any row, so a short frame
    claiming 16 windows of every channel costs no more than its length.
    Layout 7 (``terms_bit``) sends a flag bit in each channel's first
    subframe; a flagged channel sends no count but at least one coefficient
    byte per subframe, an unflagged one its counts: at least one bit per
    subframe either way, which the bound counts.
    """
    fixed = int(has_mean) + int(quantizer_bit)
    later_count = (count_bits(n) if count_change is None
                   else np.where(count_change, 1, count_bits(n)))
    first_count = count_bits(n)
    if terms_bit:
        later_count, first_count = 1, 1
    later_step = 1 if one_step is None else np.where(one_step, 0, 1)
    need = np.where(cnt > 0, STEP_BITS + fixed + first_count
                    + (cnt - 1) * (later_step + fixed + later_count), 0)
    room = (np.asarray(lengths, np.int64) - CRC_BYTES) * 8 - head_bits
    return need <= room




def parsed_frames(v: Verdicts, head: dict, valid: np.ndarray, owner: np.ndarray,
                  channel: np.ndarray, offset: np.ndarray, row_valid: np.ndarray,
                  step: np.ndarray, mean: np.ndarray | None, count: np.ndarray,
                  trellis: np.ndarray, q: np.ndarray, lag: np.ndarray | None = None,
                  alternate: np.ndarray | None = None,
                  all_terms: np.ndarray | None = None) -> ParsedFrames:
    """The :class:`ParsedFrames` of subframe rows; per frame, the terms and coarsest step.

    A frame of several windows has one step each: the frame table shows the coarsest.
    """
    nf = valid.size
    terms = np.zeros(nf, np.int64)
    np.add.at(terms, owner, (q != 0).sum(axis=1))
    frame_step = np.zeros(nf, np.int64)
    np.maximum.at(frame_step, owner, step)
    return ParsedFrames(tuple(v.verdict), tuple(v.detail), head["sequence"], valid, terms,
                        frame_step, head, owner, np.minimum(channel, 255), offset, row_valid,
                        step, mean, count, trellis, q, lag, alternate, all_terms)


def parse_checked(parse, data: bytes, offsets: np.ndarray, lengths: np.ndarray,
                  ctx: ParseContext) -> ParsedFrames:
    """``parse`` (a layout's frame parser) on the frames whose profile byte is the profile's.

    Frames of another profile are refused before any of their fields is read
    or any row allocated; the result covers every frame at ``offsets``.
    """
    buf = np.frombuffer(data, dtype=np.uint8)
    offsets = np.asarray(offsets, dtype=np.int64)
    nf = offsets.size
    v = Verdicts(nf)
    refuse_foreign(buf, offsets, ctx, v)
    keep = np.flatnonzero(v.ok)
    p = parse(data, offsets[keep], np.asarray(lengths)[keep], ctx)
    if keep.size == nf:
        return p
    for i, f in enumerate(keep.tolist()):
        v.verdict[f], v.detail[f] = p.verdict[i], p.detail[i]

    def full(a):
        out = np.zeros((nf,) + a.shape[1:], a.dtype)
        out[keep] = a
        return out

    # per-frame fields widened to every frame; the rows (every per-row field, whatever
    # the layout adds) pass through with their frame numbers mapped back
    return dataclasses.replace(
        p, verdict=tuple(v.verdict), detail=tuple(v.detail), sequence=full(p.sequence),
        valid=full(p.valid), terms=full(p.terms), step_code=full(p.step_code),
        header={k: full(a) for k, a in p.header.items()}, row_frame=keep[p.row_frame])
