"""The ``coefwire`` command line.

Each command lives in its own module and adds itself with a ``register(sub)``
function that creates its sub-parser and sets ``handler``.  Commands from
packages that build on the codec (the link simulator, the link budget) are
found through the ``coefwire.commands`` entry-point group, so the codec never
imports them.

Errors a user can cause (:class:`~codec.CoefwireError`, unreadable files) are
printed as one sentence with exit status 2; anything else is our bug and keeps
its traceback.
"""

from __future__ import annotations

import argparse
import os
import sys
from importlib.metadata import PackageNotFoundError, entry_points, version

from .._errors import CoefwireError
from . import _codec_cmds, _compare_cmd, _demo, _init_cmd, _pack_cmds, _train_cmd

__all__ = ["main", "build_parser", "UsageError"]

EXIT_OK, EXIT_MISSED, EXIT_ERROR = 0, 1, 2


class UsageError(CoefwireError):
    """A command-line combination that cannot work (exit 2)."""


def _version() -> str:
    """The installed distribution's version (the source tree's when not installed)."""
    try:
        return version("coefwire")
    except PackageNotFoundError:
        return "unknown (not installed)"


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="coefwire",
        description="Code telemetry frames at a guaranteed fidelity, simulate the link, "
        "and size the link budget.",
    )
    parser.add_argument("--version", action="version", version=f"%(prog)s {_version()}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for module in (_codec_cmds, _demo, _compare_cmd, _train_cmd, _pack_cmds, _init_cmd):
        module.register(sub)
    for ep in sorted(entry_points(group="coefwire.commands"), key=lambda e: e.name):
        ep.load()(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.handler(args) or EXIT_OK)
    except CoefwireError as exc:
        print(f"coefwire {args.command}: {exc}", file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        print(f"coefwire {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # The reader went away (e.g. '| head'): stop quietly, as Unix tools do.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 141


if __name__ == "__main__":
    sys.exit(main())
