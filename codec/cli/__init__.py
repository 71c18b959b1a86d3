"""The ``coefwire`` command line.

Each command lives in its own module and adds itself with a ``register(sub)``
function that creates its sub-parser and sets ``handler``.  Commands from
packages that build on the codec (the link simulator, the link budget) are
found through the ``coefwire.commands`` entry-point group, so the codec never
imports them.

Only the module of the command being run is imported: the others appear in the
command list by name and one-line summary (:data:`_SUMMARIES`), so ``coefwire
--help`` and a short ``encode`` do not pay for matplotlib, SciPy's statistics or
the link simulator.

Errors a user can cause (:class:`~codec.CoefwireError`, unreadable files) are
printed as one sentence with exit status 2; anything else is our bug and keeps
its traceback.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from importlib.metadata import PackageNotFoundError, entry_points, version

from .._errors import CoefwireError

__all__ = ["main", "build_parser"]

# Exit statuses: 0 done; 1 a target missed (returned by the command itself); 2 a
# user's error (a CoefwireError, printed as one sentence); 141 standard output closed
# by its reader (128 + SIGPIPE, what a shell reports for a command killed by it).
EXIT_OK, EXIT_ERROR, EXIT_BROKEN_PIPE = 0, 2, 141


def _version() -> str:
    """The installed distribution's version (the source tree's when not installed)."""
    try:
        return version("coefwire")
    except PackageNotFoundError:
        return "unknown (not installed)"


#: The modules of this package that register commands, in command-list order.
_MODULES = ("_codec_cmds", "_demo", "_compare_cmd", "_train_cmd", "_pack_cmds", "_init_cmd")
#: Which module registers each command, and its one-line summary for the command
#: list (the same text as the command's own ``help=``; a test keeps them equal).
#: A command missing here still works: its module is then always imported.
_SUMMARIES = {
    "encode": ("_codec_cmds", "code a sample file into a stream of frames"),
    "decode": ("_codec_cmds", "decode a stream back into samples"),
    "roundtrip": ("_codec_cmds", "encode, decode and check every frame meets the target"),
    "inspect": ("_codec_cmds", "list every frame of a stream"),
    "demo": ("_demo", "run the whole job on the shipped demo scenarios"),
    "compare": ("_compare_cmd", "compare bases by bits per sample at each fidelity target"),
    "train": ("_train_cmd", "fit a KLT basis on history and write it as a basis file"),
    "pack-dict": ("_pack_cmds", "train a zstd dictionary for packs on sample streams"),
    "pack": ("_pack_cmds", "pack a stream into one zstd pack and report the bits saved"),
    "unpack": ("_pack_cmds", "unpack a pack back into its stream"),
    "init": ("_init_cmd", "draw a commented profile from a sample file"),
    # from link_sim, through the coefwire.commands entry points
    "budget": (None, "link budget: margin, maximum data rate, passes, best fidelity"),
    "receive": (None, "decode frames arriving as UDP datagrams"),
    "send": (None, "send a coded stream as UDP datagrams, one frame each"),
    "simulate": (None, "send a coded sample file across a simulated noisy link"),
    "survey": (None, "survey an archive of recordings: bits per day and link verdict per group"),
    "report": (None, "write a survey's page: one self-contained HTML file"),
}


def _command_of(argv: list[str]) -> str | None:
    """The command named on the command line (the first word not starting with '-')."""
    return next((a for a in argv if not a.startswith("-")), None)


def build_parser(command: str | None = "*") -> argparse.ArgumentParser:
    """The argument parser.

    ``command`` ``"*"`` registers every command in full; a command name
    registers that command's module in full and lists the others by summary
    only (what :func:`main` does, so only the command being run is imported);
    None lists every command by summary.
    """
    parser = argparse.ArgumentParser(
        prog="coefwire",
        description="Code telemetry frames at a guaranteed fidelity, simulate the link, "
        "and size the link budget.",
    )
    parser.add_argument("--version", action="version", version=f"%(prog)s {_version()}")
    parser.add_argument("--quiet", action="store_true",
                        help="no progress reports on standard error (accepted after the "
                        "command too); long commands otherwise report after about 2 s")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    plugins = {ep.name: ep for ep in entry_points(group="coefwire.commands")}
    if command is not None and command not in _SUMMARIES and command not in plugins:
        command = "*"  # a command this list does not know (new, or a typo): load them all
    # Modules whose commands are not all known here register in full, always.
    known = {m for m, _ in _SUMMARIES.values()}
    full = {m for m in _MODULES if m not in known or command == "*"}
    if command in _SUMMARIES and _SUMMARIES[command][0] is not None:
        full.add(_SUMMARIES[command][0])
    done: set[str] = set()
    for name, (module, summary) in _SUMMARIES.items():
        if (module is not None and module in full) or (module is None and name in plugins
                                                        and command in ("*", name)):
            if module is None:
                plugins[name].load()(sub)
            elif module not in done:
                importlib.import_module(f"{__name__}.{module}").register(sub)
                done.add(module)
            continue
        if module is None and name not in plugins:
            continue  # that package is not installed
        if name not in sub.choices:
            sub.add_parser(name, help=summary, add_help=False)
    for module in sorted(full - done, key=_MODULES.index):
        importlib.import_module(f"{__name__}.{module}").register(sub)
    for name in sorted(set(plugins) - set(_SUMMARIES)):
        if command in ("*", name) or name not in sub.choices:
            plugins[name].load()(sub)  # an unknown package's command: loaded to list it
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit status."""
    argv = sys.argv[1:] if argv is None else list(argv)
    if "--quiet" in argv:  # valid before or after the command name
        from .._progress import set_quiet

        argv = [a for a in argv if a != "--quiet"]
        set_quiet(True)
    parser = build_parser(_command_of(argv))
    args = parser.parse_args(argv)
    try:
        status = int(args.handler(args) or EXIT_OK)
        sys.stdout.flush()  # a reader gone before the last bytes: caught below, not at exit
        return status
    except CoefwireError as exc:
        print(f"coefwire {args.command}: {exc}", file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        print(f"coefwire {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # The reader went away (e.g. '| head'): stop quietly with the status a shell
        # gives a command killed by SIGPIPE (128 + 13), as Unix tools do.  The one place
        # a closed pipe is handled, for every command.  Standard output is pointed at
        # the null device so the interpreter's last flush at exit cannot fail again.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return EXIT_BROKEN_PIPE


if __name__ == "__main__":
    sys.exit(main())
