"""Exit statuses scripts can trust, stuffing kept in the stream's note, inspect's columns.

decode: 0 when every sample is delivered, 1 when any is lost or nothing could be
decoded, 2 for usage and data errors (the README's contract).  Stuffing is
checked against RFC 1055 (SLIP) and the ``cobs`` package (COBS, Cheshire & Baker
1999) through the stream bytes, not through the codec's own unstuffer.
"""

import re

import numpy as np
import pytest
from cobs import cobs

from codec._profile import load_stream_note, note_path
from codec.cli import _SUMMARIES, build_parser, main
from codec.stream.search import locate_frames


@pytest.fixture
def stream(tmp_path):
    rng = np.random.default_rng(3)
    t = np.arange(600) * 0.5
    x = np.c_[t, 290 + np.sin(t / 9) + 0.01 * rng.normal(size=t.size), rng.normal(size=t.size)]
    src = tmp_path / "in.csv"
    np.savetxt(src, x, delimiter=",", header="time,temp,vib", comments="", fmt="%.6f")
    out = tmp_path / "s.cwire"
    assert main(["encode", str(src), "-o", str(out)]) == 0
    return src, out


def test_decode_exit_0_complete_1_lossy_1_empty(stream, tmp_path, capsys):
    _, s = stream
    capsys.readouterr()
    assert main(["decode", str(s), "-o", str(tmp_path / "a.csv")]) == 0
    assert "every sample delivered (1200 of 1200): exit status 0" in capsys.readouterr().out
    # Lossy: cut the stream after its first frame; the note still gives the length.  The
    # default frames carry both channels of 16 windows (one frame here): single-channel
    # frames give a stream of several.
    src = s.parent / "in.csv"
    s = tmp_path / "single.cwire"
    assert main(["encode", str(src), "-o", str(s), "--frames", "single"]) == 0
    capsys.readouterr()
    loc = locate_frames(s.read_bytes())
    assert loc.offsets.size == 2
    cut = tmp_path / "cut.cwire"
    cut.write_bytes(s.read_bytes()[: int(loc.offsets[1])])
    note_path(cut).write_bytes(note_path(s).read_bytes())
    assert main(["decode", str(cut), "-o", str(tmp_path / "b.csv")]) == 1
    out = capsys.readouterr().out
    lost = int(re.search(r"(\d+) of 1200 samples lost: exit status 1", out).group(1))
    assert 0 < lost < 1200
    # Empty: no bytes at all, but a note: nothing could be decoded, every sample lost.
    empty = tmp_path / "empty.cwire"
    empty.write_bytes(b"")
    note_path(empty).write_bytes(note_path(s).read_bytes())
    assert main(["decode", str(empty), "-o", str(tmp_path / "c.csv")]) == 1
    assert "nothing could be decoded: 1200 of 1200 samples lost" in capsys.readouterr().out
    # A usage error (missing stream) stays exit 2.
    assert main(["decode", str(tmp_path / "nope.cwire"), "-o", str(tmp_path / "d.csv")]) == 2


@pytest.mark.parametrize("kind", ["slip", "cobs"])
def test_stuffing_recorded_and_used_and_named_when_missing(stream, tmp_path, capsys, kind):
    src, plain = stream
    s = tmp_path / f"s.{kind}"
    assert main(["encode", str(src), "-o", str(s), "--stuffing", kind]) == 0
    frames = locate_frames(plain.read_bytes()).frames
    # The bytes are the plain frames stuffed one per packet: SLIP per RFC 1055 (END before
    # and after, ESC ESC_END / ESC ESC_ESC), COBS by the cobs package with a 0x00 delimiter.
    if kind == "slip":
        def slip(f):
            return b"\xc0" + f.replace(b"\xdb", b"\xdb\xdd").replace(b"\xc0", b"\xdb\xdc") + b"\xc0"
        assert s.read_bytes() == b"".join(slip(f) for f in frames)
    else:
        assert s.read_bytes() == b"".join(cobs.encode(f) + b"\x00" for f in frames)
    assert load_stream_note(note_path(s))[1].stuffing == kind
    capsys.readouterr()
    # Used automatically from the note.
    assert main(["decode", str(s), "-o", str(tmp_path / "a.csv")]) == 0
    # Read without it (a profile given, no note beside the stream): named in the message.
    bare = tmp_path / f"bare.{kind}"
    bare.write_bytes(s.read_bytes())
    assert main(["decode", str(bare), "-p", str(note_path(s)), "-o", str(tmp_path / "b.csv")]) == 2
    err = capsys.readouterr().err
    assert f"{kind.upper()}-stuffed" in err and f"--stuffing {kind}" in err
    assert len(err.strip().splitlines()) == 1
    assert not (tmp_path / "b.csv").exists()
    # With the flag it decodes.
    assert main(["decode", str(bare), "-p", str(note_path(s)), "--stuffing", kind,
                 "-o", str(tmp_path / "b.csv")]) == 0
    # inspect reads it too, with the documented columns.
    capsys.readouterr()
    assert main(["inspect", str(s)]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split() == ["byte", "kind", "seq", "channels", "basis", "terms", "step",
                                "bits", "status"]
    rows = [ln.split() for ln in lines[1:-1]]
    assert len(rows) == len(frames)
    assert all(r[4] == "dct" and float(r[6]) > 0 and r[-1] == "ok" for r in rows)
    assert main(["inspect", str(bare), "-p", str(note_path(s))]) == 2


def test_command_summaries_match_each_command_help():
    # The short list shown by 'coefwire --help' (without importing every command)
    # says what each command's own parser says.
    sub = next(a for a in build_parser("*")._actions if a.dest == "command")
    helps = {a.dest: a.help for a in sub._choices_actions}
    for name, (_, summary) in _SUMMARIES.items():
        assert helps[name] == summary, name
    lazy = next(a for a in build_parser(None)._actions if a.dest == "command")
    assert set(lazy.choices) == set(sub.choices)
    missing = set(sub.choices) - set(_SUMMARIES)
    assert not missing, f"add {missing} to codec.cli._SUMMARIES so 'coefwire --help' lists them"
