"""``init``: write a commented profile drawn from a sample file."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .._errors import ProfileError
from .._infer import FRAME_LENGTHS, infer_profile, profile_text
from .._io import atomic_output, read_samples
from .._profile import load_profile
from .common import check_distinct

__all__ = ["register"]


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "init", help="draw a commented profile from a sample file",
        description="Read INPUT (.csv or .npy) and write PROFILE (TOML): channel names, the "
        "resolution each channel is quantized at (detected from the values, with the evidence "
        "in a comment), raw bits per sample, the sample rate from the time column, plausible "
        "ranges, and the basis and frame length that code the sample in the fewest bits at the "
        "fidelity target. What cannot be inferred is said, never guessed.")
    p.add_argument("input", metavar="INPUT")
    p.add_argument("-o", "--output", required=True, metavar="PROFILE")
    p.add_argument("--fidelity", type=float, default=0.99, metavar="F",
                   help="fidelity target for the basis and frame-length search (default 0.99)")
    p.set_defaults(handler=_init)


def _init(args) -> int:
    check_distinct(args.input, args.output)
    table = read_samples(args.input)
    inf = infer_profile(table.values, table.names, table.time, table.time_name,
                        fidelity=args.fidelity, frame_lengths=FRAME_LENGTHS)
    text = profile_text(inf, Path(args.input).name)
    with atomic_output(args.output) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")
        try:
            load_profile(tmp)  # what we write must read back as a profile
        except ProfileError as exc:
            raise RuntimeError(f"init wrote a profile that does not load: {exc}") from None
    p = inf.profile
    best = inf.search[0]
    print(f"profile for {len(p.channels)} channels -> {args.output}: basis {p.basis}, "
          f"N = {p.frame_length} ({best[2]:.3f} bits/sample on the sample at F = {p.fidelity})")
    for c in inf.channels:
        if c.quantum is not None:
            print(f"  {c.spec.name}: resolution {c.quantum.value:.10g}, "
                  f"{c.spec.raw_bits_per_sample} raw bits")
    for r in inf.refusals:
        print(r, file=sys.stderr)
    return 0
