"""Profiles drawn from data: what a sample file says about its channels.

:func:`infer_profile` looks at a sample file and finds, per channel, the
quantum its values are integer multiples of (the resolution the recording was
quantized at), the raw bits per sample that its range needs at that
resolution, a plausible range with a margin, the sample rate from an evenly
spaced time column, and the basis and frame length the comparison engine finds
cheapest on the sample at the fidelity target.  What cannot be inferred is not
guessed: it is left at the profile's default and said in a sentence
(:attr:`Inference.refusals`), which :func:`profile_text` also writes into the
profile as a comment.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ._errors import InputError
from ._profile import ChannelSpec, Profile
from .transform.bases import as_basis, basis_names

__all__ = ["Quantum", "find_quantum", "ChannelInference", "Inference", "infer_profile",
           "profile_text", "RANGE_MARGIN", "FRAME_LENGTHS", "SEARCH_BASES"]

#: Margin added on each side of the observed range for the plausible range, as a
#: fraction of the range (common practice, no source).
RANGE_MARGIN = 0.1
#: Frame lengths the search tries.
FRAME_LENGTHS = (32, 64, 128, 256)
#: Samples per channel the basis and frame-length search codes at most (the head
#: of the file): enough for a stable ranking, quick on long files.
SEARCH_SAMPLES = 1 << 13
#: Bases the search tries (with the identity, which the comparison always scores):
#: the built-in transforms and one short and one long wavelet of each family.
SEARCH_BASES = ("dct", "legendre", "haar", "walsh", "db4", "db8", "sym4", "sym8")
#: Decimal digits / binary places tried for the quantum.
_MAX_DECIMALS = 9
_MAX_BINARY = 40
#: Largest integer code considered exact in float64 arithmetic.
_EXACT = 2.0**50


@dataclass(frozen=True)
class Quantum:
    """The quantum a channel's values are integer multiples of, and the evidence.

    ``value`` is ``multiplier * 10**-decimals`` or ``multiplier * 2**-binary``;
    ``distinct`` counts distinct values and ``gap_share`` is the share of the
    gaps between consecutive distinct values that are exactly one quantum
    (high when the recording really uses every level).
    """

    value: float
    base: str  # "decimal" or "binary"
    places: int
    multiplier: int
    samples: int
    distinct: int
    gap_share: float

    def evidence(self) -> str:
        """One sentence: why this quantum."""
        unit = (f"10^-{self.places}" if self.base == "decimal" else f"2^-{self.places}")
        return (f"all {self.samples} values are integer multiples of {self.value:.10g} "
                f"({self.multiplier} x {unit}); {self.distinct} distinct values, "
                f"{100 * self.gap_share:.0f} % of the gaps between neighbouring distinct "
                f"values are one quantum")


def _codes(v: np.ndarray, scale: float) -> np.ndarray | None:
    """``v * scale`` as integers if every one is an integer to float precision, else None."""
    s = v * scale
    if not np.all(np.abs(s) < _EXACT):
        return None
    r = np.rint(s)
    # a decimal like 0.1 is not exact in binary: allow the rounding of one product
    tol = 8.0 * np.finfo(np.float64).eps * np.maximum(np.abs(s), 1.0)
    if np.all(np.abs(s - r) <= tol):
        return r.astype(np.int64)
    return None


def find_quantum(values: np.ndarray) -> Quantum | None:
    """The largest quantum the finite ``values`` are integer multiples of, or None.

    Tries decimal quanta 10**-d (d = 0 ... 9) and binary ones 2**-b (b = 0 ... 40),
    each times the greatest common divisor of the integer codes (so 0.005 mV
    steps give 5 x 10**-3, an ADC with 5/1024 V steps 5 x 2**-10); of the two
    the coarser wins.  None when neither fits (values computed in floating
    point, e.g. filtered or calibrated readings) or when fewer than two
    distinct values leave the step undefined.
    """
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    uniq = np.unique(v)
    if uniq.size < 2:
        return None
    found = []
    for base, places_max, unit in (("decimal", _MAX_DECIMALS, 10.0),
                                   ("binary", _MAX_BINARY, 2.0)):
        for p in range(places_max + 1):
            codes = _codes(uniq, unit**p)
            if codes is None:
                continue
            g = int(np.gcd.reduce(np.abs(codes)))
            if g == 0:
                break
            found.append((g / unit**p, base, p, g, codes // g))
            break
    if not found:
        return None
    q, base, p, g, levels = max(found, key=lambda f: f[0])
    gaps = np.diff(levels)
    return Quantum(float(q), base, p, g, int(v.size), int(uniq.size),
                   float(np.mean(gaps == 1)))


@dataclass(frozen=True)
class ChannelInference:
    """What was inferred for one channel (None: not inferred, see the notes)."""

    spec: ChannelSpec
    quantum: Quantum | None
    minimum: float
    maximum: float
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Inference:
    """A profile drawn from a sample file, with the evidence for every value."""

    profile: Profile
    channels: tuple[ChannelInference, ...]
    rate_note: str
    search: tuple[tuple[str, int, float], ...]  # (basis, N, bits/sample), cheapest first
    refusals: tuple[str, ...] = field(default=())


def _sample_rate(time: np.ndarray | None, time_name: str) -> tuple[float | None, str]:
    if time is None:
        return None, ("sample rate not inferred: the file has no time column (a first column "
                      "named time or t); set sample_rate_hz by hand")
    if time.size < 2:
        return None, "sample rate not inferred: the time column has one row; set it by hand"
    d = np.diff(time)
    step = float(np.median(d))
    if not (step > 0 and np.allclose(d, step, rtol=1e-6, atol=0.0)):
        return None, (f"sample rate not inferred: the time column '{time_name}' is not evenly "
                      f"spaced (steps from {d.min():.6g} to {d.max():.6g}); set it by hand")
    note = (f"from the time column '{time_name}': every step is {step:.9g}, taken as seconds "
            "(change it if the column has other units)")
    return float(f"{1.0 / step:.9g}"), note


def _round_to(x: float, q: float | None, up: bool) -> float:
    if not q:
        return float(f"{x:.6g}")
    k = math.ceil(x / q) if up else math.floor(x / q)
    return float(f"{k * q:.12g}")


def _channel(name: str, v: np.ndarray, rate: float | None) -> ChannelInference:
    notes = []
    q = find_quantum(v)
    lo, hi = float(v.min()), float(v.max())
    span = hi - lo
    margin = RANGE_MARGIN * (span if span > 0 else max(abs(hi), 1.0))
    kw: dict = {"name": name, "sample_rate_hz": rate,
                "valid_min": _round_to(lo - margin, q.value if q else None, up=False),
                "valid_max": _round_to(hi + margin, q.value if q else None, up=True)}
    if q is None:
        why = ("it has fewer than two distinct values" if np.unique(v).size < 2 else
               "its values are not integer multiples of any decimal (to 10^-9) or binary "
               "(to 2^-40) quantum; they look computed rather than read from a converter")
        notes.append(f"resolution of channel '{name}' not inferred: {why}; set resolution and "
                     "raw_bits_per_sample by hand (left at 0 and 16)")
    else:
        kw["resolution"] = q.value
        levels = span / q.value + 1.0
        kw["raw_bits_per_sample"] = int(min(64, max(1, math.ceil(math.log2(levels)))))
    return ChannelInference(ChannelSpec(**kw), q, lo, hi, tuple(notes))


def infer_profile(values, names: list[str], time: np.ndarray | None = None,
                  time_name: str = "time", fidelity: float = 0.99,
                  frame_lengths=FRAME_LENGTHS, bases=None) -> Inference:
    """Draw a profile from a sample (samples x channels).

    The channel specs come from the values (:func:`find_quantum`, the range),
    the sample rate from ``time``; then every basis at every frame length in
    ``frame_lengths`` (``bases``, default :data:`SEARCH_BASES`) codes the head of the file
    (:data:`SEARCH_SAMPLES` samples) through the real encoder and decoder
    (:func:`codec._compare.compare_bases`, nothing held out, every budget
    checked on the decoded samples), and the fewest bits per sample wins.

    Raises :class:`InputError` when the sample is too short for the shortest
    frame length.
    """
    from ._compare import compare_bases  # the comparison engine builds on the codec

    x = np.asarray(values, dtype=np.float64)
    if x.ndim != 2 or x.shape[1] != len(names):
        raise InputError("the sample must be 2-D, one named column per channel")
    if not 0.0 < fidelity <= 1.0:
        raise InputError(f"fidelity {fidelity} is outside (0, 1]; give e.g. --fidelity 0.99")
    rate, rate_note = _sample_rate(time, time_name)
    chans = tuple(_channel(nm, x[:, i], rate) for i, nm in enumerate(names))
    refusals = [n for c in chans for n in c.notes]
    if rate is None:
        refusals.append(rate_note)
    head = x[:SEARCH_SAMPLES]
    lengths = [n for n in frame_lengths if 2 * n <= head.shape[0]]
    if not lengths:
        raise InputError(f"the sample has {x.shape[0]} rows; the frame-length search needs at "
                         f"least {2 * min(frame_lengths)} to compare lengths; give a longer "
                         "sample")
    base = Profile(fidelity=fidelity, channels=tuple(c.spec for c in chans))
    results = []
    for n in lengths:
        cands = [b for b in (bases or SEARCH_BASES) if b in basis_names() and _fits(b, n)]
        cmp = compare_bases(head, base.model_copy(update={"frame_length": n}), bases=cands,
                            fidelities=(fidelity,), train_fraction=0.0, names=list(names))
        for r in cmp.rows:
            if r["channel"] == "all":
                if r["frames_below_target"]:
                    raise RuntimeError("a budget missed on the decoded samples")  # our bug
                results.append((r["basis"], n, float(r["bits_per_sample"])))
    results.sort(key=lambda r: r[2])
    best_basis, best_n, _ = results[0]
    profile = base.model_copy(update={"basis": best_basis, "frame_length": best_n})
    return Inference(Profile.model_validate(profile.model_dump()), chans, rate_note,
                     tuple(results), tuple(refusals))


def _fits(name: str, n: int) -> bool:
    try:
        as_basis(name, n)
    except InputError:
        return False
    return True


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, float):
        return repr(v)
    return str(v)


def profile_text(inf: Inference, source: str) -> str:
    """The profile as commented TOML: every inferred value with its evidence."""
    p = inf.profile
    top = inf.search[:5]
    ranking = ", ".join(f"{b} N={n}: {bps:.3f}" for b, n, bps in top)
    out = [
        f"# coefwire profile drawn from {source} by 'coefwire init'.",
        "# Every value was inferred from that sample; check each one before relying on it.",
        "# Caution: lossy coding; do not use it for signals on which safety depends unless",
        "# the fidelity has been justified for that use.",
    ]
    for r in inf.refusals:
        out.append(f"# {r}")
    out += [
        f"description = {_toml_value('drawn from ' + source)}",
        f"# cheapest at F = {p.fidelity} on the sample (bits/sample, every stream bit "
        f"counted, every budget checked on the decoded samples): {ranking}",
        f"basis = {_toml_value(p.basis)}",
        f"frame_length = {p.frame_length}",
        f"fidelity = {p.fidelity!r}",
        f"reference = {_toml_value(p.reference)}",
        "# the windows of one channel in one frame share one budget ('window': each alone)",
        f"fidelity_scope = {_toml_value(p.fidelity_scope)}",
        f"windows_per_frame = {p.windows_per_frame}",
    ]
    for c in inf.channels:
        s = c.spec
        out += ["", "[[channels]]", f"name = {_toml_value(s.name)}"]
        if c.quantum is not None:
            out.append(f"# resolution: {c.quantum.evidence()}")
            out.append(f"resolution = {s.resolution!r}")
            out.append(f"# raw bits: range {c.minimum:.10g} .. {c.maximum:.10g} is "
                       f"{round((c.maximum - c.minimum) / c.quantum.value) + 1} levels of the "
                       "resolution")
            out.append(f"raw_bits_per_sample = {s.raw_bits_per_sample}")
        else:
            out.append("# resolution and raw_bits_per_sample: not inferred (see above)")
        if s.sample_rate_hz is not None:
            out.append(f"# sample rate {inf.rate_note}")
            out.append(f"sample_rate_hz = {s.sample_rate_hz!r}")
        out.append(f"# plausible range: observed {c.minimum:.10g} .. {c.maximum:.10g}, "
                   f"widened by {RANGE_MARGIN:.0%} of the range on each side")
        out.append(f"valid_min = {s.valid_min!r}")
        out.append(f"valid_max = {s.valid_max!r}")
    return "\n".join(out) + "\n"
