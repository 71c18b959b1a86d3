"""``demo``: the whole job on the bundled demo scenario."""

from __future__ import annotations


def register(sub) -> None:
    p = sub.add_parser("demo", help="run the whole job on the bundled demo scenario")
    p.add_argument("--out", metavar="DIR", help="folder for the demo's outputs")
    p.set_defaults(handler=_demo)


def _demo(args) -> int:
    raise NotImplementedError("demo is being written")
