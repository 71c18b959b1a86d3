"""Mutated streams through the decoder, with hostile CRC-valid frames (exits 1 on any finding).

    python tools/fuzz_mutations.py [--streams 10000] [--seed 7] [--profiles all|0,3,5]
                                   [--tracemalloc]

Each stream is one of fourteen profiles (channels 1 to 8, N 16 to 1024, one- and
multi-channel frames, gaps marked, layouts 1, 2, 4, 6 and the default 7), encoded
once, then mutated one to four times by:

* byte damage (the operators of ``tests/test_hostile.py``: bit flips,
  truncation, garbage with false sync markers, duplicated and deleted spans);
* frame forgery: a frame's header bits, payload, sequence number or size
  rewritten, then its length field and its CRC recomputed under the stream's
  own profile key, so the header parsers see hostile fields that pass the CRC;
* foreign frames: frames of another profile spliced in as they are (they must
  fail the CRC) or re-keyed with this profile's CRC (authentic-looking);
* frames dropped, duplicated or moved (reordering).

Each stream is decoded with the end known (the sender's sample count) or
unknown, whole or through the streaming decoder in random chunks.  A
*finding* is: any exception but the project's errors; an accounting identity
that fails (status counts recomputed from the per-sample array; every
delivered sample covered by a frame-table row and every covered sample
delivered or a gap); a delivered frame whose CRC fails (rebuilt with hashlib
and binascii); a delivered frame of another profile; a frame of the sender's
stream placed in its true window whose samples differ from the sender's
reconstruction; or, on an undamaged control stream, any sample not delivered
exactly.  Prints the counts, streams per second and the peak memory (maximum
RSS; with ``--tracemalloc`` also Python's traced peak, slower), and exits 1
if anything was found.
"""

from __future__ import annotations

import argparse
import binascii
import hashlib
import resource
import sys
import time
import tracemalloc
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from test_hostile import _mutate  # noqa: E402  (the byte-damage operators of the tests)

import codec  # noqa: E402
from codec import locate_frames  # noqa: E402

GAP_KIND = 15

#: (profile settings, channels, windows of samples, gaps marked)
PROFILES = [
    (dict(frame_length=32), 2, 6, False),
    (dict(frame_length=16, layout_version=1), 1, 8, False),
    (dict(frame_length=64, layout_version=2), 3, 3, False),
    (dict(frame_length=64, layout_version=2, multi_channel_frames=True), 4, 3, False),
    (dict(frame_length=128, multi_channel_frames=True, windows_per_frame=4), 8, 2, False),
    (dict(frame_length=256, layout_version=4, windows_per_frame=2), 2, 3, False),
    (dict(frame_length=1024, windows_per_frame=1), 1, 2, False),
    (dict(frame_length=32), 3, 5, True),
    (dict(frame_length=16, layout_version=4, multi_channel_frames=True, windows_per_frame=16),
     8, 17, False),
    (dict(frame_length=512, layout_version=1), 2, 3, True),
    (dict(frame_length=64, reference="total", basis="haar"), 5, 3, False),
    (dict(frame_length=32, layout_version=2), 2, 5, True),
    (dict(frame_length=64, multi_channel_frames=False), 3, 4, False),
    (dict(frame_length=64, layout_version=6), 2, 3, False),
]


def keyed_crc(frame_wo_crc: bytes, digest: bytes) -> int:
    """FRAME_LAYOUT.md "Profile check", from the standard library (independent of codec)."""
    prefix = hashlib.sha256(digest + (len(frame_wo_crc) + 2).to_bytes(4, "big")).digest()
    return binascii.crc_hqx(prefix + frame_wo_crc[2:], 0xFFFF)


@dataclass
class Case:
    """One profile: its clean stream, what the sender knows, and foreign frames to splice."""

    profile: codec.Profile
    samples: int
    data: bytes
    truth: np.ndarray  # the sender's reconstruction (NaN at marked gaps)
    frames: list[bytes]
    key: object
    digest: bytes
    rows: dict  # clean frame bytes -> set of (true window, channel)
    foreign: list[bytes] = field(default_factory=list)


def build_cases(rng: np.random.Generator, which: list[int]) -> list[Case]:
    cases = []
    for i in which:
        kw, ch, windows, gaps = PROFILES[i]
        prof = codec.Profile(**kw).bind([f"c{k}" for k in range(ch)])
        n = prof.frame_length
        samples = windows * n - (n // 3 if i % 2 else 0)  # some streams end on a short window
        x = np.cumsum(rng.normal(size=(samples, ch)), axis=0) * (1 + i)
        if i % 2 == 0:  # a periodic part, so that layout 5 frames carry predicted windows
            x += 40.0 * (1 + i) * np.sin(2 * np.pi * np.arange(samples) / 11.0)[:, None]
        elif i % 4 == 3:  # bursts on a flat line, so that layout 6 frames switch to Haar
            x = np.where(rng.random((samples, ch)) < 0.03, x, 0.0)
        if gaps:
            x[n // 2 : n // 2 + 5, 0] = np.nan
            x[2 * n : 3 * n, ch - 1] = np.nan  # one whole window
        enc = codec.encode(x, prof, gaps="mark" if gaps else "refuse")
        key = codec.frame_key(enc.profile)
        loc = locate_frames(enc.data, key)
        frames = loc.frames
        clean = codec.decode(enc.data, enc.profile, samples=samples)
        assert clean.delivered.sum() + (clean.status == codec.GAP).sum() == clean.status.size
        rows: dict[bytes, set] = {}
        t = clean.frames
        for off, w, c in zip(t["offset"].tolist(), t["window"].tolist(), t["channel"].tolist()):
            k = loc.offsets.tolist().index(off)
            rows.setdefault(frames[k], set()).add((w, c))
        for f in frames:  # gap frames with no inner data
            rows.setdefault(f, set())
        cases.append(Case(enc.profile, samples, enc.data, enc.reconstruction, frames, key,
                          key.digest, rows))
    # foreign frames: the same settings under another fidelity, and every other case's frames
    for i, case in zip(which, cases):
        kw, ch, windows, gaps = PROFILES[i]
        other = case.profile.model_copy(update={"fidelity": 0.5})
        x = np.cumsum(rng.normal(size=(case.samples, ch)), axis=0)
        case.foreign = locate_frames(codec.encode(x, other).data).frames
        # frames of the other cases whose profile differs (layout and frame packing are
        # described by the frames themselves, so equal settings under another layout are
        # the same profile, not a foreign one)
        case.foreign += [f for c in cases if c.digest != case.digest for f in c.frames[:6]]
    return cases


# -- frame forgery ----------------------------------------------------------------------------
def set_length(frame: bytearray) -> bytearray:
    """Write the frame's true length into its envelope length field (every kind)."""
    size = len(frame)
    version = frame[2] >> 4
    if version in (1, GAP_KIND):
        frame[3:5] = (size & 0xFFFF).to_bytes(2, "big")
    elif version in (2, 3, 4):
        if frame[2] & 0x08 or size >= 2048:
            frame[2] = (frame[2] & 0xF0) | 0x08 | ((size >> 24) & 7)
            frame[3:6] = (size & 0xFFFFFF).to_bytes(3, "big")
        else:
            frame[2] = (frame[2] & 0xF8) | (size >> 8)
            frame[3] = size & 0xFF
    return frame


def sign(frame: bytearray | bytes, digest: bytes) -> bytes:
    """The frame with its CRC recomputed under the profile ``digest`` (an insider can)."""
    frame = bytes(frame)
    return frame[:-2] + keyed_crc(frame[:-2], digest).to_bytes(2, "big")


def forge(rng: np.random.Generator, frame: bytes, case: Case) -> bytes:
    """One hostile but CRC-valid rewrite of ``frame``."""
    f = bytearray(frame)
    op = int(rng.integers(0, 6))
    if op == 0:  # random header bits (past the sync marker and length)
        for _ in range(int(rng.integers(1, 12))):
            p = int(rng.integers(4, min(len(f) - 2, 16)))
            f[p] ^= 1 << int(rng.integers(0, 8))
    elif op == 1:  # header fields to extremes: all ones or all zeros over a span
        a = int(rng.integers(4, min(len(f) - 2, 14)))
        b = min(len(f) - 2, a + int(rng.integers(1, 4)))
        f[a:b] = (b"\xff" if rng.random() < 0.6 else b"\x00") * (b - a)
    elif op == 2:  # payload bytes
        for _ in range(int(rng.integers(1, 6))):
            f[int(rng.integers(2, len(f) - 2))] = int(rng.integers(0, 256))
    elif op == 3:  # a far or wrapped sequence number
        v = f[2] >> 4
        seq = int(rng.choice([0, 1, 127, 128, 255, 32000, 65535, int(rng.integers(0, 65536))]))
        if v == 1:
            f[8:10] = (seq & 0xFFFF).to_bytes(2, "big")
        elif v == GAP_KIND:
            f[7:9] = (seq & 0xFFFF).to_bytes(2, "big")
        elif v in (2, 3, 4):
            f[7 if f[2] & 0x08 else 5] = seq & 0xFF
    elif op == 4:  # resized: cut or grown, length field made true
        body = f[:-2]
        if rng.random() < 0.5 and len(body) > 8:
            body = body[: int(rng.integers(6, len(body)))]
        else:
            body += rng.integers(0, 256, size=int(rng.integers(1, 40)), dtype=np.uint8).tobytes()
        f = body + b"\x00\x00"
    else:  # the version nibble changed (another layout reads the same bytes)
        f[2] = (int(rng.choice([1, 2, 3, 4, GAP_KIND])) << 4) | (f[2] & 0x0F)
    if rng.random() < 0.9:
        f = set_length(f)
    return sign(f, case.digest)


def mutate(rng: np.random.Generator, case: Case) -> tuple[bytes, set, bool]:
    """A mutated stream, the set of forged (CRC-valid hostile) frames, and whether it is clean."""
    frames = list(case.frames)
    forged: set[bytes] = set()
    if rng.random() < 0.02:
        return case.data, forged, True  # control: the sender's stream as sent
    damage = False
    for _ in range(int(rng.integers(1, 5))):
        op = int(rng.integers(0, 7))
        k = int(rng.integers(0, len(frames))) if frames else 0
        if op in (0, 1) and frames:  # forge one frame (twice as likely as the others)
            frames[k] = forge(rng, frames[k], case)
            forged.add(frames[k])
        elif op == 2 and case.foreign:  # splice a foreign frame, as it is or re-keyed
            f = case.foreign[int(rng.integers(0, len(case.foreign)))]
            if rng.random() < 0.5:
                f = sign(f, case.digest)
                forged.add(f)
            frames.insert(k, f)
        elif op == 3 and frames:  # drop
            del frames[k]
        elif op == 4 and frames:  # duplicate
            frames.insert(int(rng.integers(0, len(frames) + 1)), frames[k])
        elif op == 5 and len(frames) > 1:  # move (reordering)
            frames.insert(int(rng.integers(0, len(frames))), frames.pop(k))
        else:
            damage = True
    data = b"".join(frames)
    if damage:
        data = _mutate(rng, data)
    return data, forged, False


# -- the checks --------------------------------------------------------------------------------
def check(rng: np.random.Generator, case: Case, data: bytes, forged: set, control: bool,
          tally: dict) -> list[str]:
    """Decode ``data`` one way or another; return the findings (empty: none)."""
    prof, n = case.profile, case.profile.frame_length
    channels = len(prof.channels)
    known = rng.random() < 0.5
    samples = case.samples if known else None
    try:
        dec = codec.decode(data, prof, samples=samples, strict=False)
        if rng.random() < 0.15:  # the streaming decoder, random chunks, must agree
            sd = codec.StreamDecoder(prof, samples=samples)
            blocks, pos = [], 0
            while pos < len(data):
                step = int(rng.integers(1, 600))
                blocks += sd.feed(data[pos : pos + step])
                pos += step
            blocks += sd.close()
            vals = (np.concatenate([b.samples for b in blocks]) if blocks
                    else np.zeros((0, channels)))
            if not np.array_equal(vals, dec.samples, equal_nan=True):
                return ["streaming decode differs from whole decode"]
    except codec.CoefwireError as exc:
        return [f"strict=False raised {type(exc).__name__}: {exc}"]
    except Exception as exc:  # noqa: BLE001 - every escape is a finding
        return [f"raised {type(exc).__name__}: {exc}"]
    out: list[str] = []
    st = dec.status
    c = dec.counts
    # accounting, recomputed from the per-sample array
    bc = np.bincount(st.ravel(), minlength=4)
    if (bc[0], bc[1], bc[2], bc[3]) != (c["samples_lost"], c["samples_delivered"],
                                        c["samples_gap"], c["samples_concealed"]):
        out.append(f"status counts differ from the per-sample array: {c}")
    if c["samples"] * channels != st.size or bc.sum() != st.size:
        out.append("samples x channels differs from the status array")
    if known and st.shape[0] != case.samples:
        out.append(f"end known, yet {st.shape[0]} samples out of {case.samples}")
    # every delivered sample is covered by a frame-table row, and every covered one is
    # delivered or a gap
    t = dec.frames
    cover = np.zeros(st.shape, dtype=bool)
    for w, ch, v in zip(t["window"].tolist(), t["channel"].tolist(), t["valid"].tolist()):
        cover[w * n : w * n + v, ch] = True
    if not np.array_equal(cover & (st != codec.GAP), st == codec.DELIVERED):
        out.append("delivered samples differ from the frames the table lists")
    # where each delivered row came from
    foreign = set(case.foreign)
    verdict: dict[int, bool] = {}
    for off, ln, w, ch, v in zip(t["offset"].tolist(), t["length"].tolist(),
                                 t["window"].tolist(), t["channel"].tolist(),
                                 t["valid"].tolist()):
        f = data[off : off + ln]
        if off not in verdict:
            verdict[off] = keyed_crc(f[:-2], case.digest) == int.from_bytes(f[-2:], "big")
            if not verdict[off]:
                out.append(f"frame at byte {off} delivered with a failing CRC")
        if not verdict[off]:
            continue
        if f in foreign and f not in forged:
            out.append(f"frame at byte {off} of another profile delivered")
            continue
        if f in forged:
            tally["forged_delivered"] += 1
            continue
        if f not in case.rows:
            tally["chance_crc_pass"] += 1  # damage that passed CRC-16 by chance (~2^-16)
            continue
        if (w, ch) in case.rows[f]:  # the sender's frame in its true window: exact values
            # (a forged gap mask may hide some samples, a forged short frame end the
            # output early: compare what was delivered)
            m = min(v, st.shape[0] - w * n, case.truth.shape[0] - w * n)
            d = st[w * n : w * n + m, ch] == codec.DELIVERED
            got = dec.samples[w * n : w * n + m, ch][d]
            want = case.truth[w * n : w * n + m, ch][d]
            if not np.array_equal(got, want):
                out.append(f"window {w} channel {ch} differs from the sender's reconstruction")
        elif not forged and known:
            out.append(f"the sender's frame at byte {off} placed in window {w}, not its own")
    if control and not (dec.status == codec.DELIVERED).sum() + (dec.status == codec.GAP).sum() \
            == case.truth.size:
        out.append("an undamaged stream was not delivered in full")
    if control and not np.array_equal(dec.samples, case.truth, equal_nan=True):
        out.append("an undamaged stream differs from the sender's reconstruction")
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--streams", type=int, default=10_000)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--profiles", default="all",
                    help=f"'all' or indices 0..{len(PROFILES) - 1}, comma-separated")
    ap.add_argument("--tracemalloc", action="store_true",
                    help="also report Python's traced peak (about 2x slower)")
    args = ap.parse_args()
    which = (list(range(len(PROFILES))) if args.profiles == "all"
             else [int(v) for v in args.profiles.split(",")])
    rng = np.random.default_rng(args.seed)
    cases = build_cases(np.random.default_rng(args.seed + 1), which)
    tally = {"forged_delivered": 0, "chance_crc_pass": 0}
    findings: list[str] = []
    kinds: dict[str, int] = {}
    inputs_bytes = 0
    if args.tracemalloc:
        tracemalloc.start()
    t0 = time.perf_counter()
    for i in range(args.streams):
        case = cases[i % len(cases)]
        data, forged, control = mutate(rng, case)
        inputs_bytes += len(data)
        for msg in check(rng, case, data, forged, control, tally):
            kind = msg.split(":")[0] if msg.startswith(("raised", "strict")) else msg[:40]
            kinds[kind] = kinds.get(kind, 0) + 1
            if len(findings) < 20:
                findings.append(f"stream {i} (profile {which[i % len(cases)]}): {msg}")
    dt = time.perf_counter() - t0
    traced = tracemalloc.get_traced_memory()[1] if args.tracemalloc else None
    if args.tracemalloc:
        tracemalloc.stop()
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # kB on Linux -> MB
    raised = sum(v for k, v in kinds.items() if k.startswith(("raised", "strict")))
    crc_bad = sum(v for k, v in kinds.items() if "failing CRC" in k)
    foreign = sum(v for k, v in kinds.items() if "another profile" in k)
    print(f"streams {args.streams} over {len(cases)} profiles, {inputs_bytes} bytes, "
          f"{dt:.1f} s, {args.streams / dt:.0f} streams/s")
    print(f"exceptions {raised}, accounting or placement breaks "
          f"{sum(kinds.values()) - raised - crc_bad - foreign}, CRC-failed frames delivered "
          f"{crc_bad}, foreign frames delivered {foreign}")
    print(f"forged CRC-valid rows delivered (authentic-looking, allowed) "
          f"{tally['forged_delivered']}, damage passing CRC-16 by chance "
          f"{tally['chance_crc_pass']}")
    print(f"peak memory: max RSS {rss:.0f} MB"
          + (f", tracemalloc peak {traced / 1e6:.1f} MB" if traced is not None else ""))
    for f in findings:
        print("FINDING", f)
    return 1 if kinds else 0


if __name__ == "__main__":
    sys.exit(main())
