"""Every frame of a stream, one record each: what ``coefwire inspect`` lists.

:func:`list_frames` goes through the frame search and the decoder's own
per-frame interpreter, so it reads every layout version and gap-mask frames,
and a damaged frame is a record with its verdict, never an error.  The CRC
covers the profile (FRAME_LAYOUT.md, "Profile check"): without one, frames
are only split as their envelopes claim and their contents are not read.
"""

from __future__ import annotations

from dataclasses import dataclass

from .._profile import Profile
from ..encoder import frame_key
from ..layouts.envelope import GAP_KIND
from ..quantize.steps import step_from_code
from .frames import decode_frames
from .search import Located, locate_frames

__all__ = ["FrameLine", "Listing", "list_frames"]


@dataclass(frozen=True)
class FrameLine:
    """One frame of a stream (or one CRC failure).

    ``kind`` is ``v1``..``v4`` (layout version), ``gap`` (gap-mask frame) or
    ``-`` (a CRC failure, which has nothing else).  ``status`` is ``ok``, the
    verdict and its detail (``bad_header: ...``), ``CRC FAILED`` or ``not
    checked`` (no profile).  The header fields are None when not read (no
    profile); ``basis`` and ``step`` (the coarsest quantizer step, for a frame
    of several windows) also for a gap-mask or refused frame.
    """

    offset: int
    kind: str
    bits: int | None
    status: str
    sequence: int | None = None
    channels: tuple[int, ...] = ()
    basis: str | None = None
    terms: int | None = None
    step: float | None = None


@dataclass(frozen=True)
class Listing:
    """The frames of a stream in byte order, and the frame search's account of it."""

    lines: tuple[FrameLine, ...]
    located: Located


def list_frames(data: bytes, profile: Profile | None = None) -> Listing:
    """List every frame of ``data`` (an unstuffed stream) under ``profile``.

    Parameters
    ----------
    data : bytes
        The stream.
    profile : Profile, optional
        Its bound profile; without one (or with no channels) frames are split
        by their envelopes only and their contents are not read.

    Returns
    -------
    Listing
        One :class:`FrameLine` per CRC-valid frame and per CRC failure, by
        byte offset, and the frame search's :class:`Located`.
    """
    from ..transform.bases import _kinds
    from ..transform.klt import profile_basis

    checked = profile is not None and bool(profile.channels)
    loc = locate_frames(data, frame_key(profile) if checked else None)
    fr = decode_frames(loc.frames, profile, profile_basis(profile)) if checked else None
    names = {kind.code: name for name, kind in _kinds().items()}
    lines = [FrameLine(int(o), "-", None, "CRC FAILED") for o in loc.crc_failures]
    for i, off in enumerate(loc.offsets.tolist()):
        version = loc.frames[i][2] >> 4
        kind = "gap" if version == GAP_KIND else f"v{version}"
        bits = 8 * len(loc.frames[i])
        if fr is None:
            lines.append(FrameLine(off, kind, bits, "not checked"))
            continue
        chans = fr.row_channel[fr.row_frame == i].tolist()
        chans += [c for c, *_ in fr.masks.get(i, ())]
        ok = fr.verdict[i] == "ok"
        shown = ok and version != GAP_KIND  # basis and step of a frame that carries data
        code = int(fr.head["basis"][i])
        lines.append(FrameLine(
            off, kind, bits, "ok" if ok else f"{fr.verdict[i]}: {fr.detail[i]}",
            int(fr.sequence[i]), tuple(sorted(set(chans))),
            names.get(code, str(code)) if shown else None, int(fr.head["terms"][i]),
            float(step_from_code(fr.head["step_code"][i])) if shown else None))
    lines.sort(key=lambda line: line.offset)
    return Listing(tuple(lines), loc)
