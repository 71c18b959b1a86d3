"""Pieces shared by several commands: profile options, reports, output files.

A public module: the commands of packages built on the codec (``link_sim``'s
``simulate``, ``budget``, ``send`` and ``receive``) use these helpers too, so
their options, number formats and JSON output match the codec's commands.
"""

from __future__ import annotations

import argparse
import json
import math
import os
from pathlib import Path

import numpy as np

from .._errors import InputError, ProfileError
from .._io import atomic_output, is_stdio
from .._profile import Profile, default_profile, load_profile

__all__ = ["add_profile_options", "resolve_profile", "write_json", "fmt", "json_ready",
           "check_distinct", "check_paths", "json_text", "parse_fidelities"]


def add_profile_options(p: argparse.ArgumentParser, profile_help: str | None = None) -> None:
    """``-p PROFILE`` and the codec overrides, shared by every coding command."""
    p.add_argument("-p", "--profile", metavar="PROFILE",
                   help=profile_help or "profile TOML (default: DCT, N=64, F=0.99, ac, "
                   "resolution 0, every column)")
    p.add_argument("--basis", metavar="NAME", help="basis name (see 'coefwire encode --help')")
    p.add_argument("--fidelity", type=float, metavar="F",
                   help="energy fraction to retain in every frame, 0 < F <= 1")
    p.add_argument("--reference", choices=("total", "ac"),
                   help="reference energy: total = sum x^2, ac = sum (x - mean)^2")
    p.add_argument("--frame-length", type=int, metavar="N", help="samples per frame")
    p.add_argument("--layout", type=int, choices=(1, 2, 3, 4, 5, 6, 7), metavar="V",
                   help="frame layout the encoder writes: 7 (default: 6 without a channel's count "
                   "fields where they cost more than the zeros, and a range-coded string per "
                   "channel of a multi-channel frame), 6 (5 with the Haar basis for a "
                   "channel's bursty frames), 5 (3 with long-term prediction inside a "
                   "frame), 3, or 4 (adds dependent quantization where it saves bits: slower "
                   "to encode); 1 and 2 are older")
    p.add_argument("--frames", choices=("multi", "single"),
                   help="what one frame carries: every channel of its windows (multi; the "
                   "default from layout 7: one header for all channels, but a lost frame "
                   "loses them all) or one channel (single; the default before layout 7)")
    p.add_argument("--scope", choices=("window", "frame"), dest="fidelity_scope",
                   help="what one fidelity budget covers: every window of every channel "
                   "(window), or the windows of one channel that travel in one frame together "
                   "(frame; the profile's fidelity_scope, default frame)")
    p.add_argument("--max-error", type=float, metavar="E",
                   help="peak-error limit in engineering units for every channel: no decoded "
                   "sample differs from the input by more than E (with --fidelity 0 it is the "
                   "only target)")


def _frames_choice(args: argparse.Namespace) -> bool | None:
    """``--frames``: True for multi, False for single, None when not given."""
    frames = getattr(args, "frames", None)
    return None if frames is None else frames == "multi"


def resolve_profile(args: argparse.Namespace, names: list[str] | None = None) -> Profile:
    """The effective profile: file or built-in default, overrides applied, bound to ``names``."""
    profile = load_profile(args.profile) if args.profile else default_profile()
    profile = profile.override(basis=args.basis, fidelity=args.fidelity,
                               reference=args.reference, frame_length=args.frame_length,
                               layout_version=getattr(args, "layout", None),
                               fidelity_scope=getattr(args, "fidelity_scope", None),
                               multi_channel_frames=_frames_choice(args))
    profile = profile.bind(names) if names is not None else profile
    max_error = getattr(args, "max_error", None)
    if max_error is not None:
        if not (math.isfinite(max_error) and max_error > 0):
            raise ProfileError(f"--max-error must be a positive number, got {max_error}",
                               "command line")
        if not profile.channels:
            raise ProfileError("--max-error needs the input's channels; give the input file",
                               "command line")
        profile = profile.model_copy(update={"channels": tuple(
            c.model_copy(update={"max_error": max_error}) for c in profile.channels)})
    return profile


def json_ready(obj):
    """Convert NumPy scalars/arrays and non-finite floats into JSON-safe values."""
    if isinstance(obj, dict):
        return {str(k): json_ready(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [json_ready(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return json_ready(obj.tolist())
    if isinstance(obj, np.generic):
        return json_ready(obj.item())
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def write_json(path: str | Path | None, report: dict) -> None:
    """Write ``report`` as JSON to ``path`` atomically (nothing when path is None)."""
    if path is None:
        return
    with atomic_output(path) as tmp:
        Path(tmp).write_text(json_text(report), encoding="utf-8")


def json_text(report: dict) -> str:
    """``report`` as the JSON text the commands write (for a caller committing it with others)."""
    return json.dumps(json_ready(report), indent=2) + "\n"


def fmt(value, spec: str = ".3f", none: str = "n/a") -> str:
    """Format a number that may be None (unbounded SNR, empty set)."""
    return none if value is None else format(value, spec)


def check_distinct(inp: str | Path, out: str | Path) -> None:
    """Refuse to overwrite the input with the output."""
    check_paths({"input": inp}, {"output": out})


def _same(a: Path, b: Path) -> bool:
    """Whether two paths name one file: equal after resolving links, or one inode."""
    if a.resolve() == b.resolve():
        return True
    try:
        return os.path.samefile(a, b)  # hard links, bind mounts
    except OSError:  # either does not exist yet
        return False


def check_paths(inputs: dict, outputs: dict) -> None:
    """Refuse any output that names an input or another output (links resolved).

    ``inputs`` and ``outputs`` map a label ("the profile", "--json") to a path;
    ``None`` and ``-`` (standard input/output) are skipped.  Called before any
    work, so a refused run writes nothing and reads nothing twice.
    """
    def real(items: dict) -> list[tuple[str, Path]]:
        return [(k, Path(v)) for k, v in items.items() if v is not None and not is_stdio(v)]

    ins, outs = real(inputs), real(outputs)
    for i, (label, out) in enumerate(outs):
        for what, inp in ins:
            if _same(inp, out):
                raise InputError(f"the {label} would overwrite the {what} ({inp}); name "
                                 "another file", str(out))
        for other, out2 in outs[i + 1:]:
            if _same(out, out2):
                raise InputError(f"the {label} and the {other} name the same file; name two "
                                 "different files", str(out))


def parse_fidelities(text: str) -> list[float]:
    """``--fidelity F1,F2,...`` as sorted distinct targets 0 < F <= 1 (one sentence if not)."""
    values = []
    for part in text.split(","):
        try:
            f = float(part)
        except ValueError:
            raise InputError(f"--fidelity: {part.strip()!r} is not a number; give a comma-"
                             "separated list such as 0.9,0.99", "command line") from None
        if not (math.isfinite(f) and 0.0 < f <= 1.0):
            raise InputError(f"--fidelity: {f:g} is outside the allowed range 0 < F <= 1; "
                             "give targets such as 0.9,0.99", "command line")
        values.append(f)
    return sorted(set(values))
