"""Hostile files and paths: one sentence and exit 2, no input overwritten, no partial output.

Each case here crashed with a traceback, destroyed an input, or allocated without bound
before these checks (an attack run against the landed tree found them).  Memory is
measured with the standard library's ``tracemalloc``, which NumPy reports its array
buffers to; the bounds are common practice, no source (a few times what a legitimate
file of that size needs).
"""

from __future__ import annotations

import contextlib
import io
import os
import tomllib
import tracemalloc
import zipfile
from pathlib import Path

import numpy as np
import pytest
from realdata import motion

import codec
from codec._profile import MAX_TOML_DEPTH, read_toml, toml_depth
from codec.cli import main
from codec.quantize.select import MAX_MAGNITUDE
from codec.stream.packs import make_pack, open_pack
from codec.transform.klt import load_trained_basis, save_trained_basis, train_klt


def _run(argv: list[str], capsys) -> tuple[int, str]:
    """Exit status and standard error of one command run in-process."""
    with contextlib.redirect_stdout(io.StringIO()):
        rc = main([str(a) for a in argv])
    return rc, capsys.readouterr().err


def _one_sentence(err: str) -> None:
    # the CLI contract: one line, no traceback (common practice, no source)
    assert err.count("\n") == 1 and "Traceback" not in err, err


@pytest.fixture
def csv_in(tmp_path):
    x = motion("train")[:512, :2]  # real accelerometer counts shipped by obspy
    path = tmp_path / "in.csv"
    np.savetxt(path, x, delimiter=",", header="ax,ay", comments="")
    return path


@contextlib.contextmanager
def _peak_bytes():
    """Peak bytes allocated inside the block (tracemalloc, standard library)."""
    out = [0]
    tracemalloc.start()
    try:
        yield out
    finally:
        out[0] = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()


# -- item 5: no output may name an input --------------------------------------------------

def test_json_naming_the_input_is_refused_and_the_input_unchanged(csv_in, tmp_path, capsys):
    before = csv_in.read_bytes()
    rc, err = _run(["encode", csv_in, "-o", tmp_path / "s.cwire", "--json", csv_in], capsys)
    assert rc == 2 and csv_in.read_bytes() == before
    _one_sentence(err)
    assert not (tmp_path / "s.cwire").exists()
    # through a symbolic link: compared after resolving it
    link = tmp_path / "link.csv"
    link.symlink_to(csv_in)
    rc, err = _run(["encode", link, "-o", tmp_path / "s.cwire", "--json", csv_in], capsys)
    assert rc == 2 and csv_in.read_bytes() == before
    # decode: the JSON may name neither the stream nor its recorded profile
    stream = tmp_path / "t.cwire"
    assert _run(["encode", csv_in, "-o", stream], capsys)[0] == 0
    for target in (stream, Path(f"{stream}.profile.toml")):
        kept = target.read_bytes()
        rc, err = _run(["decode", stream, "-o", tmp_path / "o.csv", "--json", target], capsys)
        assert rc == 2 and target.read_bytes() == kept
        _one_sentence(err)
        assert not (tmp_path / "o.csv").exists()


def test_encode_onto_its_own_profile_is_refused(csv_in, tmp_path, capsys):
    stream = tmp_path / "s.cwire"
    assert _run(["encode", csv_in, "-o", stream], capsys)[0] == 0
    profile = tmp_path / "p.toml"
    profile.write_bytes(Path(f"{stream}.profile.toml").read_bytes())
    before = profile.read_bytes()
    rc, err = _run(["encode", csv_in, "-o", profile, "-p", profile], capsys)
    assert rc == 2 and profile.read_bytes() == before
    _one_sentence(err)
    # the stream's note would overwrite the profile read: refused as well
    rc, _ = _run(["encode", csv_in, "-o", tmp_path / "u", "-p", tmp_path / "u.profile.toml"],
                 capsys)
    assert rc == 2


def test_a_report_that_cannot_be_written_leaves_no_stream(csv_in, tmp_path, capsys):
    stream = tmp_path / "s.cwire"
    (tmp_path / "box").mkdir()
    rc, err = _run(["encode", csv_in, "-o", stream, "--json", tmp_path / "box"], capsys)
    assert rc == 2
    _one_sentence(err)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["box", "in.csv"]
    assert _run(["encode", csv_in, "-o", stream], capsys)[0] == 0
    rc, _ = _run(["decode", stream, "-o", tmp_path / "o.csv", "--json",
                  tmp_path / "none" / "r.json"], capsys)
    assert rc == 2 and not (tmp_path / "o.csv").exists()


def test_outputs_onto_a_folder_or_into_a_read_only_folder(csv_in, tmp_path, capsys,
                                                          monkeypatch):
    (tmp_path / "box").mkdir()
    rc, err = _run(["encode", csv_in, "-o", tmp_path / "box"], capsys)
    assert rc == 2
    _one_sentence(err)
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o500)
    try:
        if os.access(ro, os.W_OK):  # running as root: the OS grants the write anyway
            def refuse(*_a, **_k):
                raise PermissionError(13, "Permission denied")
            monkeypatch.setattr("tempfile.mkstemp", refuse)
        rc, err = _run(["encode", csv_in, "-o", ro / "s.cwire"], capsys)
    finally:
        ro.chmod(0o700)
    assert rc == 2 and "folder" in err
    _one_sentence(err)
    assert list(ro.iterdir()) == []


# -- item 6: crashes that become one sentence ---------------------------------------------

@pytest.mark.parametrize("big", [1e40, 1e308])
def test_values_beyond_the_quantizer_name_the_column_and_the_limit(tmp_path, capsys, big):
    # 1e308 is finite: below DBL_MAX = 1.7976931348623157e308 (IEEE 754 binary64).
    assert np.isfinite(big) and big < np.finfo(np.float64).max
    rng = np.random.default_rng(7)
    x = rng.normal(size=(256, 2))
    x[:, 1] = np.clip(x[:, 1], -1, 1) * big
    path = tmp_path / "big.csv"
    np.savetxt(path, x, delimiter=",", header="calm,loud", comments="", fmt="%.17g")
    rc, err = _run(["encode", path, "-o", tmp_path / "s.cwire"], capsys)
    assert rc == 2 and "'loud'" in err and f"{MAX_MAGNITUDE:.6g}" in err
    _one_sentence(err)
    with pytest.raises(codec.InputError, match="loud"):
        codec.encode(x, codec.Profile().bind(["calm", "loud"]))


@pytest.mark.parametrize("layout", [1, 2, 3, 4])
def test_the_largest_magnitude_allowed_codes_and_decodes(layout):
    # at the limit itself the codec works (constant and alternating frames, the two
    # extremes of the DCT's energy placement); checked against the input, not the coder
    x = np.c_[np.full(256, MAX_MAGNITUDE), np.where(np.arange(256) % 2, 1, -1) * MAX_MAGNITUDE]
    p = codec.Profile(layout_version=layout, frame_length=64)
    enc = codec.encode(x, p)
    dec = codec.decode(enc.data, enc.profile, samples=256)
    err = np.sum((dec.samples - x) ** 2, axis=0)
    assert np.all(err <= (1 - 0.99) * np.sum((x - x.mean(0)) ** 2, axis=0) + 256 * (
        MAX_MAGNITUDE * 2.0**-40) ** 2)


def _csv_named(path: Path, names: list[str]) -> Path:
    rng = np.random.default_rng(1)
    np.savetxt(path, rng.normal(size=(64, len(names))), delimiter=",", header=",".join(names),
               comments="")
    return path


def test_names_and_channel_counts_encode_refuses_are_those_decode_refuses(tmp_path, capsys):
    # item 7 and the long-name crash: what encode accepts, its own profile reads back
    ok = [("c" * 64, "b"), tuple(f"c{i}" for i in range(256))]
    bad = [("c" * 65, "b"), ("a", "a"), tuple(f"c{i}" for i in range(257))]
    for k, names in enumerate(ok):
        src = _csv_named(tmp_path / f"ok{k}.csv", list(names))
        stream = tmp_path / f"ok{k}.cwire"
        assert _run(["encode", src, "-o", stream], capsys)[0] == 0
        assert _run(["decode", stream, "-o", tmp_path / f"ok{k}.out.csv"], capsys)[0] == 0
        assert tomllib.loads(Path(f"{stream}.profile.toml").read_text())["channels"][0][
            "name"] == names[0]
    for k, names in enumerate(bad):
        src = _csv_named(tmp_path / f"bad{k}.csv", list(names))
        rc, err = _run(["encode", src, "-o", tmp_path / f"bad{k}.cwire"], capsys)
        assert rc == 2 and not (tmp_path / f"bad{k}.cwire").exists()
        _one_sentence(err)
    with pytest.raises(codec.InputError):
        codec.encode(np.zeros((64, 257)), codec.Profile())


def test_npy_header_claiming_more_than_the_file_holds(tmp_path, capsys):
    # header written by NumPy's own format writer (NEP 1 / numpy.lib.format)
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(
        buf, {"descr": "<f8", "fortran_order": False, "shape": (2_000_000_000, 8)})
    path = tmp_path / "bomb.npy"
    path.write_bytes(buf.getvalue().ljust(200, b"\0"))
    assert path.stat().st_size == 200
    with _peak_bytes() as peak:
        rc, err = _run(["encode", path, "-o", tmp_path / "s.cwire"], capsys)
    assert rc == 2 and peak[0] < 32 << 20
    _one_sentence(err)
    good = tmp_path / "good.npy"
    np.save(good, motion("train")[:128, :2])
    assert _run(["encode", good, "-o", tmp_path / "g.cwire"], capsys)[0] == 0


def test_basis_file_declaring_a_huge_matrix_is_refused_before_expanding(tmp_path, capsys):
    # A deflated .npz whose matrix member declares 32768 x 32768 float64 (8 GiB); its data
    # is cut short here (the real one is 8 MB of deflated zeros), which changes nothing
    # for a check that must come before any expansion.
    path = tmp_path / "bomb.cwbasis.npz"
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        head = io.BytesIO()
        np.lib.format.write_array_header_1_0(
            head, {"descr": "<f8", "fortran_order": False, "shape": (32768, 32768)})
        zf.writestr("matrix.npy", head.getvalue() + bytes(1 << 20))
        for key, arr in (("energy", np.zeros(32768)), ("note", np.array("x = 1"))):
            buf = io.BytesIO()
            np.save(buf, arr)
            zf.writestr(f"{key}.npy", buf.getvalue())
    with _peak_bytes() as peak, pytest.raises(codec.ProfileError, match="32768"):
        load_trained_basis(path)
    assert peak[0] < 64 << 20
    # through a profile naming it, from the command line
    prof = tmp_path / "klt.toml"
    prof.write_text(f'basis = "klt"\nframe_length = 64\nbasis_file = "{path.name}"\n'
                    f'basis_sha256 = "{"0" * 64}"\n')
    src = _csv_named(tmp_path / "in.csv", ["a"])
    rc, err = _run(["encode", src, "-o", tmp_path / "s.cwire", "-p", prof], capsys)
    assert rc == 2
    _one_sentence(err)
    # a genuine basis file still loads
    trained = train_klt(motion("train")[:, :3], 16)
    save_trained_basis(trained, tmp_path / "real.cwbasis.npz")
    assert load_trained_basis(tmp_path / "real.cwbasis.npz").matrix.shape == (16, 16)


@pytest.mark.parametrize("deep", [
    "a = " + "[" * 50_000 + "]" * 50_000 + "\n",
    "a = " + "{b = " * 50_000 + "1" + "}" * 50_000 + "\n",
    "a" + ".a" * 50_000 + " = 1\n",
])
def test_toml_nested_50000_deep_is_refused_before_parsing(tmp_path, capsys, csv_in, deep):
    path = tmp_path / "deep.toml"
    path.write_text(deep)
    rc, err = _run(["encode", csv_in, "-o", tmp_path / "s.cwire", "-p", path], capsys)
    assert rc == 2 and str(MAX_TOML_DEPTH) in err
    _one_sentence(err)


def _nesting(value) -> int:
    """Depth of a parsed TOML value: arrays and tables count one level each."""
    if isinstance(value, dict):
        return 1 + max((_nesting(v) for v in value.values()), default=0)
    if isinstance(value, list):
        return 1 + max((_nesting(v) for v in value), default=0)
    return 0


def test_toml_depth_matches_the_standard_parser(tmp_path):
    # tomllib (Python's standard library) is the reference: the depth counted before
    # parsing is never below the depth of what it parses, and strings or comments full
    # of brackets and dots do not count
    rng = np.random.default_rng(5)
    for _ in range(40):
        d = int(rng.integers(1, 20))
        kind = int(rng.integers(0, 3))
        if kind == 0:
            text = "x = " + "[" * d + "1.5" + "]" * d
        elif kind == 1:
            text = "x = " + "{y = " * d + "2.5" + "}" * d
        else:
            text = ".".join(["k"] * d) + " = 3.5"
        text += '\ns = "[[[[{{{{ a.b.c.d.e.f = \\" [[[["  # ]]]] [[[[ x.y.z.w = 1\n'
        text += "m = '''\n[[[[\na.b.c.d.e = 1\n'''\n"
        parsed = tomllib.loads(text)
        # a dotted key of d parts is d tables, the top one included
        assert toml_depth(text) == _nesting(parsed["x"] if kind < 2 else parsed) == d
    for demo in Path(codec.__file__).parent.glob("data/*.toml"):
        assert read_toml(demo) == tomllib.loads(demo.read_text())


# -- item 4 (notes and packs) and the unpack buffer ----------------------------------------

def _edited_note(src: Path, dst: Path, samples: int) -> None:
    text = src.read_text().splitlines()
    dst.write_text("\n".join(f"samples = {samples}" if ln.startswith("samples =") else ln
                             for ln in text) + "\n")


def test_a_note_claiming_more_samples_than_the_stream_carries(csv_in, tmp_path, capsys,
                                                              monkeypatch):
    stream = tmp_path / "s.cwire"
    assert _run(["encode", csv_in, "-o", stream], capsys)[0] == 0
    edited = tmp_path / "e.cwire"
    edited.write_bytes(stream.read_bytes())
    # decode: 3e6 rather than the 1e9 of the attack, so that a decoder without the check
    # fails this test by its memory (about 100 MB) instead of exhausting the machine's
    _edited_note(Path(f"{stream}.profile.toml"), Path(f"{edited}.profile.toml"), 3 * 10**6)
    with _peak_bytes() as peak:
        rc, err = _run(["decode", edited, "-o", tmp_path / "o.csv"], capsys)
    assert rc == 2 and "3000000" in err and peak[0] < 16 << 20
    _one_sentence(err)
    assert not (tmp_path / "o.csv").exists()
    # the stream on standard input: checked when its bytes have been counted, before the end
    monkeypatch.setattr("sys.stdin", io.TextIOWrapper(io.BytesIO(stream.read_bytes())))
    with _peak_bytes() as peak:
        rc, err = _run(["decode", "-", "-p", f"{edited}.profile.toml", "-o", tmp_path / "o.csv"],
                       capsys)
    assert rc == 2 and peak[0] < 16 << 20 and not (tmp_path / "o.csv").exists()
    _one_sentence(err)
    _edited_note(Path(f"{stream}.profile.toml"), Path(f"{edited}.profile.toml"), 10**9)
    rc, err = _run(["pack", edited, "-o", tmp_path / "e.cwpack"], capsys)
    assert rc == 2 and "1000000000" in err and not (tmp_path / "e.cwpack").exists()
    _one_sentence(err)
    # unpack checks the note it copies
    assert _run(["pack", stream, "-o", tmp_path / "s.cwpack"], capsys)[0] == 0
    _edited_note(Path(f"{stream}.profile.toml"), tmp_path / "s.cwpack.profile.toml", 10**9)
    rc, err = _run(["unpack", tmp_path / "s.cwpack", "-o", tmp_path / "u.cwire"], capsys)
    assert rc == 2 and not (tmp_path / "u.cwire").exists()
    _one_sentence(err)
    # the true count is accepted
    _edited_note(Path(f"{stream}.profile.toml"), tmp_path / "s.cwpack.profile.toml", 512)
    assert _run(["unpack", tmp_path / "s.cwpack", "-o", tmp_path / "u.cwire"], capsys)[0] == 0
    assert (tmp_path / "u.cwire").read_bytes() == stream.read_bytes()


def test_unpack_cap_buffer_grows_with_what_arrives(tmp_path, capsys):
    data = bytes(range(256)) * 64
    pack = make_pack(data)
    with _peak_bytes() as peak:
        assert open_pack(pack, max_output_size=10**11) == data
    assert peak[0] < 16 << 20  # not the 100 GB the cap allows
    # and the cap still holds: one byte short of the stream is refused
    with pytest.raises(codec.FrameError):
        open_pack(pack, max_output_size=len(data) - 1)


def test_unpack_with_a_huge_cap_from_the_command_line(csv_in, tmp_path, capsys):
    stream = tmp_path / "s.cwire"
    assert _run(["encode", csv_in, "-o", stream], capsys)[0] == 0
    assert _run(["pack", stream, "-o", tmp_path / "s.cwpack"], capsys)[0] == 0
    rc, _ = _run(["unpack", tmp_path / "s.cwpack", "-o", tmp_path / "u.cwire", "--max-bytes",
                  str(10**11)], capsys)
    assert rc == 0 and (tmp_path / "u.cwire").read_bytes() == stream.read_bytes()
