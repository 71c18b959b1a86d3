"""Batch mode for store-and-forward links: many frames in one zstd bundle.

A live link sends frames one by one, so each frame must stand alone.  A
store-and-forward link (a logger emptied over a pass, a relay) may instead
send a whole batch at once; then a general-purpose compressor can remove what
frames repeat among themselves: sync markers, profile byte, sequence numbers,
similar header fields.  The bundle is a zstandard frame of the concatenated
stream compressed with a dictionary that zstd's own trainer
(``zstandard.train_dictionary``, the ZDICT/COVER algorithm) builds from sample
frames of the profile's scenario; both ends hold the dictionary beforehand, so
it is not counted in the bundle's bits (its size is reported).

The frames inside stay exactly the bytes the per-frame coder made, so a
decoded bundle goes straight to :func:`codec.decode`.  Whether the bundle
saves anything is measured, not assumed: :func:`bundle_report` states the bits
against per-frame coding, and says so when the bundle costs more.

References
----------
Y. Collet and M. Kucherawy, "Zstandard Compression and the application/zstd
Media Type", RFC 8878, 2021 (dictionaries: section 5).
"""

from __future__ import annotations

import numpy as np
import zstandard

from ._errors import FrameError, InputError
from ._stream import locate_frames

__all__ = ["train_dictionary", "pack_bundle", "unpack_bundle", "bundle_report", "BUNDLE_LEVEL"]

#: zstd level used for bundles (store-and-forward: time is cheap, bits are not).
BUNDLE_LEVEL = 19


def _frames_of(data: bytes) -> list[bytes]:
    return locate_frames(data).frames


def train_dictionary(sample_streams: list[bytes], size_bytes: int = 4096) -> bytes:
    """A zstd dictionary trained on the frames of ``sample_streams`` (one sample per frame).

    Raises :class:`InputError` when there are too few frames for zstd's trainer.
    """
    samples = [f for s in sample_streams for f in _frames_of(s)]
    if len(samples) < 8:
        raise InputError(f"only {len(samples)} sample frames; train the bundle dictionary on "
                         "at least 8 frames", "dictionary")
    try:
        d = zstandard.train_dictionary(size_bytes, samples, level=BUNDLE_LEVEL)
    except zstandard.ZstdError as exc:
        raise InputError(f"zstd could not train a dictionary ({exc}); give more or larger "
                         "sample frames", "dictionary") from None
    return d.as_bytes()


def pack_bundle(data: bytes, dictionary: bytes | None = None) -> bytes:
    """Compress a stream of frames into one bundle (zstd level 19, optional dictionary)."""
    zd = zstandard.ZstdCompressionDict(dictionary) if dictionary else None
    zc = zstandard.ZstdCompressor(level=BUNDLE_LEVEL, dict_data=zd, write_content_size=True)
    return zc.compress(data)


def unpack_bundle(bundle: bytes, dictionary: bytes | None = None,
                  max_output_size: int = 1 << 28) -> bytes:
    """The stream inside ``bundle``; refuses to expand beyond ``max_output_size`` bytes.

    The cap protects the receiver from a corrupt or hostile bundle that would
    expand without bound.
    """
    zd = zstandard.ZstdCompressionDict(dictionary) if dictionary else None
    dz = zstandard.ZstdDecompressor(dict_data=zd)
    try:
        params = zstandard.get_frame_parameters(bundle)
    except zstandard.ZstdError:
        raise FrameError("not a zstd bundle; check the file", "bundle") from None
    if params.content_size > max_output_size:
        raise FrameError(f"the bundle would expand to {params.content_size} bytes, over the "
                         f"{max_output_size}-byte cap; raise the cap if it is genuine", "bundle")
    try:
        return dz.decompress(bundle, max_output_size=max_output_size)
    except zstandard.ZstdError as exc:
        raise FrameError(f"the bundle does not decompress ({exc}); it is corrupt or needs "
                         "another dictionary", "bundle") from None


def bundle_report(data: bytes, bundle: bytes, samples: int, dictionary: bytes | None) -> dict:
    """Bits of the bundle against per-frame coding of the same stream, per input sample."""
    per_frame = 8 * len(data)
    bundled = 8 * len(bundle)
    saved = per_frame - bundled
    return {
        "per_frame_bits": per_frame,
        "bundle_bits": bundled,
        "bits_saved": saved,
        "saved_percent": 100.0 * saved / per_frame if per_frame else 0.0,
        "per_frame_bits_per_sample": per_frame / samples,
        "bundle_bits_per_sample": bundled / samples,
        "dictionary_bytes": len(dictionary) if dictionary else 0,
        "verdict": ("the bundle saves bits" if saved > 0 else
                    "the bundle saves nothing: send the frames as they are"),
        "frames": int(np.size(locate_frames(data).offsets)),
    }
