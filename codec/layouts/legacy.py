"""Old-style dict views of :class:`codec.layouts.registry.ParsedFrames` for the compatibility
modules ``v1v2`` and ``v3v4`` (code written before layouts became registered units)."""

from __future__ import annotations

import numpy as np

from .registry import ParsedFrames

__all__ = ["as_dict"]


def as_dict(p: ParsedFrames, trellis: bool = False, several: bool = False) -> dict:
    """The keys the former ``parse_frames_v2`` / ``parse_frames_v3`` returned."""
    h = p.header
    out = {"profile": h["profile"], "sequence": p.sequence, "multi": h["multi"] > 0,
           "valid": p.valid, "length": h["length"],
           "consumed_ok": np.array([v == "ok" for v in p.verdict], dtype=bool),
           "frame": p.row_frame, "channel": p.row_channel, "step_code": p.row_step,
           "mean": p.row_mean, "count": p.row_count, "q": p.q}
    if several:
        out.update({"window_offset": p.row_offset, "sub_valid": p.row_valid,
                    "windows": h["windows_minus_1"] + 1,
                    "trellis": p.row_trellis if trellis else None,
                    "mean_pred": h["mean_change"] > 0, "count_pred": h["count_change"] > 0})
    return out
