"""Round-trip helpers shared by the codec tests, built on the independent checker.

The budgets are recomputed by :mod:`verify` from the input, the profile and the
decoded samples alone; nothing here reads the encoder's own ``budget`` or
``met`` fields.
"""

from __future__ import annotations

import numpy as np
from verify import assert_budgets

__all__ = ["assert_meets_target", "assert_roundtrip", "assert_png_is_a_picture",
           "assert_frames_decode_alone", "assert_header_flips_never_crash",
           "registered_layouts"]


def assert_meets_target(x, x_hat, profile, scope: str | None = None):
    """Every budget block of ``x_hat`` meets the profile's target (floors included)."""
    return assert_budgets(np.asarray(x, float), x_hat, profile, scope)


def registered_layouts() -> list[int]:
    """Version numbers of every layout registered now (built-in ones and any a test added)."""
    from codec.layouts.registry import layouts

    return [lay.version for lay in layouts()]


def assert_roundtrip(profile, samples, layouts=None):
    """decode(encode(x)) meets the target on every budget block, and re-encoding is stable,
    under every registered layout (or the versions in ``layouts``).

    Returns ``(enc, dec)`` of the profile's own layout (of the last one checked
    when that is not among them).
    """
    results = {}
    for version in registered_layouts() if layouts is None else layouts:
        results[version] = _roundtrip_one(
            profile.model_copy(update={"layout_version": version}), samples)
    return results.get(profile.layout_version, results[version])


def _roundtrip_one(profile, samples):
    import codec

    enc = codec.encode(samples, profile)
    dec = codec.decode(enc.data, enc.profile, samples=samples.shape[0])
    assert dec.delivered.all()
    assert np.array_equal(dec.samples, enc.reconstruction)
    assert_meets_target(np.asarray(samples, float), dec.samples, enc.profile)
    again = codec.encode(samples, profile)
    assert again.data == enc.data  # deterministic: same input, same bytes
    return enc, dec


def assert_png_is_a_picture(path):
    """Decode the PNG (matplotlib.image.imread, an independent reader) and check it is
    a real picture: a plausible size and drawn ink, not a blank canvas."""
    import matplotlib.image

    img = matplotlib.image.imread(path)
    assert img.ndim == 3 and img.shape[0] >= 200 and img.shape[1] >= 200, img.shape
    ink = (img[..., :3] < 0.9).any(axis=2)  # not (near) white
    assert 0.01 < ink.mean() < 0.9, ink.mean()
    assert len(np.unique(img[..., :3].reshape(-1, 3), axis=0)) > 8  # lines, text, colours


def assert_frames_decode_alone(x, enc):
    """Every frame of ``enc`` decodes on its own to the encoder's reconstruction of the
    samples it carries; no two frames carry a sample, and together they carry all."""
    import codec

    loc = codec.locate_frames(enc.data)
    covered = np.zeros(x.shape, bool)
    for off, ln in zip(loc.offsets.tolist(), loc.lengths.tolist()):
        dec = codec.decode(enc.data[off : off + ln], enc.profile, samples=x.shape[0])
        ok = dec.delivered
        assert np.array_equal(dec.samples[ok], enc.reconstruction[ok])
        assert not (covered & ok).any()
        covered |= ok
    assert covered.all()


def assert_header_flips_never_crash(enc, samples: int, header_bytes: int):
    """Every bit of the first frame's first ``header_bytes`` bytes after the sync marker
    flipped, the CRC rebuilt under the profile (tests/streams.py): the decoder refuses the
    frame or decodes it to finite samples, and never raises."""
    from streams import digest_of, with_crc

    import codec

    frame = enc.data[: codec.locate_frames(enc.data).lengths[0]]
    digest = digest_of(enc.profile)
    for bit in range(16, 8 * min(len(frame) - 2, header_bytes)):
        body = bytearray(frame[:-2])
        body[bit // 8] ^= 0x80 >> (bit % 8)
        dec = codec.decode(with_crc(bytes(body), digest), enc.profile, samples=samples,
                           strict=False)
        assert np.isfinite(dec.samples[dec.delivered]).all()
