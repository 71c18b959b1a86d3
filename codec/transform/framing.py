"""Cutting a (samples x channels) stream into frames and putting it back.

Frames are rows of one 2-D array in window-major order: all channels of time
window 0, then all channels of window 1, and so on, which is also the order in
which a live link sends them.  A short last window is padded by repeating its
last sample (a smooth continuation costs fewer bits than zeros) and trimmed
again on the way back.
"""

from __future__ import annotations

import numpy as np

__all__ = ["split_frames", "merge_frames"]


def split_frames(x: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Frames of ``n`` samples from ``x`` (samples x channels).

    Returns ``(frames, valid, channel, window)`` with one entry per frame.
    """
    samples, channels = x.shape
    windows = -(-samples // n)
    pad = windows * n - samples
    xp = np.pad(x, ((0, pad), (0, 0)), mode="edge") if pad else x
    frames = np.ascontiguousarray(xp.reshape(windows, n, channels).transpose(0, 2, 1))
    frames = frames.reshape(windows * channels, n)
    window = np.repeat(np.arange(windows), channels)
    channel = np.tile(np.arange(channels), windows)
    valid = np.where(window == windows - 1, n - pad, n)
    return frames, valid, channel, window


def merge_frames(
    frames: np.ndarray, channel: np.ndarray, window: np.ndarray, samples: int, channels: int
) -> tuple[np.ndarray, np.ndarray]:
    """Place decoded frames back into a (samples x channels) array.

    Positions no frame covers are NaN; the boolean mask says which are filled.
    """
    n = frames.shape[1]
    windows = -(-samples // n) if samples else 0
    out = np.full((windows, channels, n), np.nan)
    filled = np.zeros((windows, channels, n), dtype=bool)
    keep = window < windows
    out[window[keep], channel[keep]] = frames[keep]
    filled[window[keep], channel[keep]] = True
    out = out.transpose(0, 2, 1).reshape(windows * n, channels)[:samples]
    filled = filled.transpose(0, 2, 1).reshape(windows * n, channels)[:samples]
    return out, filled
