"""``train``: fit a Karhunen-Loeve basis on history and write it as a basis file."""

from __future__ import annotations

import argparse
from pathlib import Path

from .._errors import InputError
from .._io import read_samples
from ..transform.klt import note_toml, save_trained_basis, train_klt
from .common import check_distinct

__all__ = ["register"]


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "train", help="fit a KLT basis on history and write it as a basis file",
        description="Fit the Karhunen-Loeve transform (principal components of frames of "
        "INPUT) and write BASIS_FILE (.cwbasis.npz with the matrix and a TOML provenance note). "
        "A profile uses it with basis = \"klt\", basis_file and basis_sha256.")
    p.add_argument("input", metavar="INPUT", help="history as .csv or .npy")
    p.add_argument("-o", "--output", required=True, metavar="BASIS_FILE",
                   help="basis file to write (.cwbasis.npz)")
    p.add_argument("--frame-length", type=int, default=64, metavar="N",
                   help="samples per frame (default 64)")
    p.add_argument("--channels", metavar="A,B,...",
                   help="train on these columns only (default: every column)")
    p.set_defaults(handler=_train)


def _train(args) -> int:
    check_distinct(args.input, args.output)
    table = read_samples(args.input)
    values, names = table.values, table.names
    if args.channels:
        wanted = [c.strip() for c in args.channels.split(",") if c.strip()]
        missing = [c for c in wanted if c not in names]
        if missing or not wanted:
            raise InputError(f"no column named {', '.join(missing) or '(none)'}; the columns "
                             f"are {', '.join(names)}", args.input)
        cols = [names.index(c) for c in wanted]
        values, names = values[:, cols], wanted
    trained = train_klt(values, args.frame_length, names, input_name=Path(args.input).name)
    save_trained_basis(trained, args.output)
    note = trained.note
    print(f"trained a {note.frame_length}-term KLT basis on {note.frames_used} frames of "
          f"{len(names)} channels -> {args.output}")
    print(note_toml(trained), end="")
    print("\nto use it, put in the profile:\n"
          f'basis = "klt"\nbasis_file = "{args.output}"\n'
          f'basis_sha256 = "{note.sha256}"\nframe_length = {note.frame_length}')
    return 0
