"""Coverage-guided fuzzing of the decoder with atheris (run it for hours; it is not a test).

    pip install atheris
    python tools/fuzz_decode.py -atheris_runs=0 -max_total_time=3600 [corpus_dir]

Every input is decoded three ways: as a plain byte stream, through SLIP and
COBS unstuffing, and in uneven chunks through the streaming decoder.  A finding
is any exception other than the project's documented errors (CoefwireError),
any delivered sample from a frame whose CRC fails (checked with binascii,
independently of the codec), an accounting identity that does not hold, or a
streaming result that differs from the whole-stream one.  The seed corpus
(written to the corpus folder on first run) holds encoded streams, one with gaps.

The fuzzing process's own RSS grows with its coverage tables (about 90 kB per
input was seen here; the decoder's memory per input stays under 1 MB, checked
by replaying libFuzzer's out-of-memory unit), so for runs of hours give
``-rss_limit_mb=16384`` or ``-fork=1 -ignore_ooms=1``.
"""

from __future__ import annotations

import binascii
import sys
from pathlib import Path

import numpy as np

try:
    import atheris
except ImportError:  # pragma: no cover - the harness needs the fuzzer
    sys.exit("atheris is not installed: pip install atheris")

with atheris.instrument_imports():
    import codec
    from codec._stuffing import Unstuffer

PROFILE = codec.Profile(frame_length=16).bind(["a", "b"])


def _seed_corpus(folder: Path) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    if any(folder.iterdir()):
        return
    rng = np.random.default_rng(0)
    x = np.cumsum(rng.normal(size=(100, 2)), axis=0)
    enc = codec.encode(x, PROFILE)
    (folder / "clean").write_bytes(enc.data)
    x[10:30, 1] = np.nan
    (folder / "gaps").write_bytes(codec.encode(x, PROFILE, gaps="mark").data)


def _check(data: bytes) -> None:
    try:
        dec = codec.decode(data, PROFILE, samples=100, strict=False)
    except codec.CoefwireError:
        return
    c = dec.counts
    if c["samples_delivered"] + c["samples_lost"] + c["samples_gap"] != dec.status.size:
        raise AssertionError(f"accounting broken: {c}")
    for off, length in zip(dec.frames["offset"].tolist(), dec.frames["length"].tolist()):
        f = data[off : off + length]
        if binascii.crc_hqx(f[2:-2], 0xFFFF) != int.from_bytes(f[-2:], "big"):
            raise AssertionError(f"frame at {off} delivered without a valid CRC")
    # Same result in uneven chunks.
    sd = codec.StreamDecoder(PROFILE, samples=100)
    blocks, pos, step = [], 0, 1
    while pos < len(data):
        blocks += sd.feed(data[pos : pos + step])
        pos += step
        step = step * 3 % 17 + 1
    blocks += sd.close()
    vals = np.concatenate([b.samples for b in blocks]) if blocks else np.zeros((0, 2))
    if not np.array_equal(vals, dec.samples, equal_nan=True):
        raise AssertionError("chunked decode differs from whole decode")


def TestOneInput(data: bytes) -> None:  # noqa: N802 - the name atheris calls
    _check(data)
    for kind in ("slip", "cobs"):
        u = Unstuffer(kind)
        _check(b"".join(u.feed(data) + u.close()))


def main() -> None:
    corpus = [a for a in sys.argv[1:] if not a.startswith("-")]
    if corpus:
        _seed_corpus(Path(corpus[0]))
    atheris.Setup(sys.argv, TestOneInput)
    atheris.Fuzz()


if __name__ == "__main__":
    main()
