"""Coverage-guided fuzzing of the decoder with atheris (run it for hours; it is not a test).

    pip install atheris
    python tools/fuzz_decode.py -atheris_runs=0 -max_total_time=3600 [corpus_dir]
    python tools/fuzz_decode.py --replay FILE...     (no atheris needed: rerun saved inputs)

The first input byte picks one of the profiles of ``tools/fuzz_mutations.py``
(channels 1 to 8, N 16 to 1024, one- and multi-channel frames, gaps, layouts
1 to 4).  The second says what to do with the rest before decoding:

* bit 0: recompute the CRC of every candidate frame under the profile's key
  (FRAME_LAYOUT.md, "Profile check") after writing its true length into its
  length field, so the fuzzer's header mutations pass the CRC and reach the
  header parsers, as an insider's would;
* bit 1: splice the frames of another profile (as they are: they must fail
  the CRC) between the input's frames;
* bit 2: decode with the end unknown (no sample count);
* bit 3: also decode through SLIP and COBS unstuffing.

Every input is decoded whole and in uneven chunks through the streaming
decoder.  A finding (raised, so the fuzzer saves the input) is any exception
other than the project's documented errors, a broken accounting identity, a
delivered frame whose CRC fails (rebuilt with hashlib and binascii), a delivered
frame of another profile, or a chunked result that differs from the whole one.
The seed corpus (written to the corpus folder on first run) holds each
profile's clean stream.

The fuzzing process's own RSS grows with its coverage tables, so for runs of
hours give ``-rss_limit_mb=16384`` or ``-fork=1 -ignore_ooms=1``.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

try:
    import atheris
except ImportError:  # pragma: no cover - only --replay works without the fuzzer
    atheris = None

if atheris is not None:
    with atheris.instrument_imports():
        import codec
        from codec import Unstuffer
else:
    import codec
    from codec import Unstuffer

import fuzz_mutations as fm  # noqa: E402  (profiles, keyed CRC, forgery helpers)

from codec.layouts.envelope import frame_extents  # noqa: E402

_CASES: list = []


def _cases() -> list:
    if not _CASES:
        _CASES.extend(fm.build_cases(np.random.default_rng(0), list(range(len(fm.PROFILES)))))
    return _CASES


def resign_all(data: bytes, digest: bytes) -> bytes:
    """Every candidate frame (a sync marker with a known envelope) made CRC-valid in place.

    Its length field is made true to the bytes up to the next sync marker (or
    the end), then its CRC recomputed under ``digest``; a mutated header then
    reaches the parsers instead of failing the CRC.
    """
    u = np.frombuffer(data, dtype=np.uint8)
    sp = np.flatnonzero((u[:-1] == 0xE3) & (u[1:] == 0x5A))
    if not sp.size:
        return data
    length, _ = frame_extents(u, sp)
    out, prev = [], 0
    ends = np.r_[sp[1:], u.size]
    for a, b, ln in zip(sp.tolist(), ends.tolist(), length.tolist()):
        out.append(data[prev:a])
        f = bytearray(data[a:b])
        if ln >= 0 and len(f) >= 8:
            f = fm.set_length(f)
            f = bytearray(fm.sign(f, digest))
        out.append(bytes(f))
        prev = b
    out.append(data[prev:])
    return b"".join(out)


def check(data: bytes) -> None:
    """Decode one fuzz input; raise AssertionError on a finding."""
    if len(data) < 2:
        return
    cases = _cases()
    case = cases[data[0] % len(cases)]
    mode, body = data[1], data[2:]
    if mode & 1:
        body = resign_all(body, case.digest)
    if mode & 2 and case.foreign:
        frames = case.foreign[: 1 + data[0] % 4]
        body = body[: len(body) // 2] + b"".join(frames) + body[len(body) // 2 :]
    samples = None if mode & 4 else case.samples
    inputs = [body]
    if mode & 8:
        for kind in ("slip", "cobs"):
            u = Unstuffer(kind)
            inputs.append(b"".join(u.feed(body) + u.close()))
    rng = np.random.default_rng(len(body))
    for x in inputs:
        msgs = fm.check(rng, case, x, set(), False, {"forged_delivered": 0,
                                                     "chance_crc_pass": 0})
        # forged (re-signed) frames are authentic-looking: only these findings count here
        real = [m for m in msgs if not m.startswith(("window", "the sender's"))]
        if real:
            raise AssertionError("; ".join(real))
        prof = case.profile
        whole = codec.decode(x, prof, samples=samples, strict=False)
        sd = codec.StreamDecoder(prof, samples=samples)
        blocks, pos, step = [], 0, 1
        while pos < len(x):
            blocks += sd.feed(x[pos : pos + step])
            pos += step
            step = step * 3 % 17 + 1
        blocks += sd.close()
        vals = (np.concatenate([b.samples for b in blocks]) if blocks
                else np.zeros((0, len(prof.channels))))
        if not np.array_equal(vals, whole.samples, equal_nan=True):
            raise AssertionError("chunked decode differs from whole decode")


def TestOneInput(data: bytes) -> None:  # noqa: N802 - the name atheris calls
    check(data)


def _seed_corpus(folder: Path) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    if any(folder.iterdir()):
        return
    for i, case in enumerate(_cases()):
        for mode in (0, 1, 6):
            (folder / f"p{i}_m{mode}").write_bytes(bytes([i, mode]) + case.data)


def main() -> int:
    if "--replay" in sys.argv:
        files = sys.argv[sys.argv.index("--replay") + 1 :]
        for f in files:
            check(Path(f).read_bytes())
            print(f"{f}: no finding")
        return 0
    if atheris is None:
        sys.exit("atheris is not installed: pip install atheris (or use --replay FILE...)")
    corpus = [a for a in sys.argv[1:] if not a.startswith("-")]
    if corpus:
        _seed_corpus(Path(corpus[0]))
    atheris.Setup(sys.argv, TestOneInput)
    atheris.Fuzz()
    return 0


if __name__ == "__main__":
    sys.exit(main())
