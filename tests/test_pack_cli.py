"""The batch-mode commands: ``pack-dict``, ``pack`` and ``unpack``.

The shipped demo scenarios (invented, in ``codec/data``) are split into a first
day that trains the dictionary and a second day that is packed, so the
dictionary never saw the stream it packs.  The pack is checked with the
reference ``zstandard`` library and against the zstd format (RFC 8878).
"""

import hashlib
import json
import os
import tomllib

import numpy as np
import pytest
import zstandard
from checks import assert_meets_target

from codec._io import read_samples
from codec._profile import load_profile
from codec.cli import main
from codec.cli._demo import scenario_files

#: RFC 8878 section 3.1.1: a zstd frame starts with magic number 0xFD2FB528, little-endian.
ZSTD_FRAME_MAGIC = bytes.fromhex("28b52ffd")
#: RFC 8878 section 5: a zstd dictionary starts with magic number 0xEC30A437, little-endian.
ZSTD_DICT_MAGIC = bytes.fromhex("37a430ec")


def _halves(name, folder):
    """Rows of the first and second half of a demo scenario as two CSV files."""
    csv_path, _ = scenario_files(name)
    lines = csv_path.read_text().splitlines()
    half = 1 + (len(lines) - 1) // 2
    first, second = folder / f"{name}.1.csv", folder / f"{name}.2.csv"
    first.write_text("\n".join(lines[:half]) + "\n")
    second.write_text("\n".join([lines[0]] + lines[half:]) + "\n")
    return first, second


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    """Encoded halves of both demo scenarios and a dictionary trained on each first half."""
    d = tmp_path_factory.mktemp("pack")
    out = {"dir": d}
    for name, short in (("ridge_station", "r"), ("orbiter_hk", "o")):
        first, second = _halves(name, d)
        profile = str(scenario_files(name)[1])
        for i, csv in ((1, first), (2, second)):
            stream = d / f"{short}{i}.cwire"
            # single-channel frames (as the README's measurement): half a demo scenario is
            # only a few multi-channel frames, fewer than the 8 samples pack-dict trains on
            assert main(["encode", str(csv), "-p", profile, "-o", str(stream),
                         "--frames", "single"]) == 0
            out[f"{short}{i}"] = stream
        out[f"{short}csv"] = second
        out[f"{short}dict"] = d / f"{short}.cwdict"
        assert main(["pack-dict", str(out[f"{short}1"]), "-o", str(out[f"{short}dict"])]) == 0
    return out


def _fails(capsys, argv, *absent):
    """The command exits 2 with one sentence on stderr, no traceback, no output file."""
    capsys.readouterr()
    assert main([str(a) for a in argv]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "Traceback" not in err and err.startswith("coefwire ")
    for path in absent:
        assert not os.path.exists(path), path
    assert not [p for p in os.listdir(os.path.dirname(absent[0]) if absent else ".")
                if p.endswith(".part")]
    return err


def test_dictionary_and_its_note(work):
    raw = work["rdict"].read_bytes()
    assert raw[:4] == ZSTD_DICT_MAGIC
    meta = tomllib.loads((work["dir"] / "r.cwdict.note.toml").read_text())
    assert meta["dictionary_bytes"] == os.path.getsize(work["rdict"])
    assert meta["sha256"] == hashlib.sha256(raw).hexdigest()  # hashlib: reference SHA-256
    # the reference library reads the same id back from the dictionary's header
    assert meta["zstd_dictionary_id"] == zstandard.ZstdCompressionDict(raw).dict_id()
    assert meta["streams"] == [str(work["r1"])] and meta["frames_used"] >= 8
    assert meta["trained_utc"].endswith("+00:00")


def test_round_trip_is_byte_identical_and_decodes_the_same(work, tmp_path, capsys):
    pack, back = tmp_path / "r2.cwpack", tmp_path / "back.cwire"
    rep = tmp_path / "rep.json"
    assert main(["pack", str(work["r2"]), "-d", str(work["rdict"]), "-o", str(pack),
                 "--json", str(rep)]) == 0
    raw = pack.read_bytes()
    stream = work["r2"].read_bytes()
    # RFC 8878: one zstd frame; the reference library parses its header and expands it
    assert raw[:4] == ZSTD_FRAME_MAGIC
    params = zstandard.get_frame_parameters(raw)
    dictionary = work["rdict"].read_bytes()
    assert params.dict_id == zstandard.ZstdCompressionDict(dictionary).dict_id() != 0
    assert params.content_size == len(stream)
    zd = zstandard.ZstdCompressionDict(dictionary)
    assert zstandard.ZstdDecompressor(dict_data=zd).decompress(raw) == stream
    assert main(["unpack", str(pack), "-d", str(work["rdict"]), "-o", str(back)]) == 0
    assert back.read_bytes() == stream
    assert (tmp_path / "back.cwire.profile.toml").read_bytes() == \
        (work["dir"] / "r2.cwire.profile.toml").read_bytes()
    # coefwire decode gives the same samples from the unpacked stream as from the original
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    assert main(["decode", str(work["r2"]), "-o", str(a)]) == 0
    assert main(["decode", str(back), "-o", str(b)]) == 0
    assert a.read_bytes() == b.read_bytes()
    decoded, original = read_samples(b), read_samples(work["rcsv"])
    assert np.array_equal(decoded.time, original.time)
    # The guarantee holds on the decoder's values (.npy: full precision); the CSV text
    # rounds each value to one decimal finer than the channel's resolution.
    assert main(["decode", str(back), "-o", str(tmp_path / "b.npy")]) == 0
    profile = load_profile(scenario_files("ridge_station")[1])
    assert_meets_target(original.values, np.load(tmp_path / "b.npy"), profile)
    assert np.abs(decoded.values - np.load(tmp_path / "b.npy")).max() <= 0.05 + 1e-9


def test_report_bits_are_file_sizes(work, tmp_path):
    pack, rep = tmp_path / "o2.cwpack", tmp_path / "rep.json"
    assert main(["pack", str(work["o2"]), "-d", str(work["odict"]), "-o", str(pack),
                 "--json", str(rep)]) == 0
    r = json.loads(rep.read_text())
    assert r["per_frame_bits"] == 8 * os.path.getsize(work["o2"])
    assert r["pack_bits"] == 8 * os.path.getsize(pack)
    assert r["bits_saved"] == r["per_frame_bits"] - r["pack_bits"]
    assert r["dictionary_bytes"] == os.path.getsize(work["odict"])
    # samples and channels counted from the CSV itself, not from the codec
    rows = len(work["ocsv"].read_text().splitlines()) - 1
    cols = len(work["ocsv"].read_text().splitlines()[0].split(",")) - 1  # minus time
    assert (r["samples"], r["channels"]) == (rows, cols)
    assert r["pack_bits_per_sample"] == pytest.approx(r["pack_bits"] / (rows * cols))
    assert r["per_frame_bits_per_sample"] == pytest.approx(r["per_frame_bits"] / (rows * cols))
    assert r["dictionary_sha256"] == hashlib.sha256(work["odict"].read_bytes()).hexdigest()
    assert r["zstd_dictionary_id"] == zstandard.get_frame_parameters(pack.read_bytes()).dict_id
    assert r["pack_written"] is True
    assert r["verdict"] == ("the pack saves bits" if r["bits_saved"] > 0 else
                            "the pack saves nothing: send the frames as they are")


def test_without_output_it_only_measures(work, tmp_path, capsys):
    rep = tmp_path / "rep.json"
    assert main(["pack", str(work["r2"]), "--json", str(rep)]) == 0
    r = json.loads(rep.read_text())
    assert r["pack_written"] is False and r["dictionary_sha256"] is None
    assert r["zstd_dictionary_id"] == 0 and r["dictionary_bytes"] == 0
    assert sorted(os.listdir(tmp_path)) == ["rep.json"]


def test_a_pack_that_saves_nothing_says_so(tmp_path, capsys):
    # One short frame: zstd's frame and block headers (RFC 8878, 3.1.1) outweigh any
    # repetition inside it, so a pack cannot be smaller.
    csv = tmp_path / "tiny.csv"
    rng = np.random.default_rng(3)
    np.savetxt(csv, rng.normal(size=(8, 1)), delimiter=",", header="x", comments="", fmt="%.6f")
    stream = tmp_path / "tiny.cwire"
    assert main(["encode", str(csv), "-o", str(stream)]) == 0
    pack, rep = tmp_path / "tiny.cwpack", tmp_path / "rep.json"
    capsys.readouterr()
    assert main(["pack", str(stream), "-o", str(pack), "--only-if-smaller",
                 "--json", str(rep)]) == 0
    out = capsys.readouterr().out
    r = json.loads(rep.read_text())
    assert r["bits_saved"] <= 0 and r["pack_written"] is False
    assert "saves nothing" in out and "not written" in out
    assert not pack.exists() and not (tmp_path / "tiny.cwpack.profile.toml").exists()
    # asked for without the flag, it is written (and still says it saves nothing)
    assert main(["pack", str(stream), "-o", str(pack)]) == 0
    assert "saves nothing" in capsys.readouterr().out
    assert 8 * os.path.getsize(pack) >= 8 * os.path.getsize(stream)


def test_wrong_or_missing_dictionary_is_refused(work, tmp_path, capsys):
    pack = tmp_path / "r2.cwpack"
    assert main(["pack", str(work["r2"]), "-d", str(work["rdict"]), "-o", str(pack)]) == 0
    out = tmp_path / "out.cwire"
    err = _fails(capsys, ["unpack", pack, "-d", work["odict"], "-o", out],
                 out, f"{out}.profile.toml")
    rid = zstandard.ZstdCompressionDict(work["rdict"].read_bytes()).dict_id()
    oid = zstandard.ZstdCompressionDict(work["odict"].read_bytes()).dict_id()
    assert f"id {rid}" in err and f"id {oid}" in err
    err = _fails(capsys, ["unpack", pack, "-o", out], out, f"{out}.profile.toml")
    assert f"id {rid}" in err and "--dictionary" in err
    # a file that is not a zstd dictionary at all
    junk = tmp_path / "junk.cwdict"
    junk.write_bytes(b"no dictionary here")
    assert "not a zstd dictionary" in _fails(
        capsys, ["unpack", pack, "-d", junk, "-o", out], out)


def test_decompression_cap(work, tmp_path, capsys):
    pack = tmp_path / "r2.cwpack"
    assert main(["pack", str(work["r2"]), "-d", str(work["rdict"]), "-o", str(pack)]) == 0
    out = tmp_path / "out.cwire"
    size = os.path.getsize(work["r2"])
    err = _fails(capsys, ["unpack", pack, "-d", work["rdict"], "-o", out,
                          "--max-bytes", size - 1], out, f"{out}.profile.toml")
    assert "cap" in err and str(size) in err
    assert main(["unpack", str(pack), "-d", str(work["rdict"]), "-o", str(out),
                 "--max-bytes", str(size)]) == 0
    # a frame that does not declare its size is cut off at the cap while expanding
    blind = tmp_path / "blind.cwpack"
    blind.write_bytes(zstandard.ZstdCompressor(write_content_size=False).compress(
        work["r2"].read_bytes()))
    assert zstandard.get_frame_parameters(blind.read_bytes()).content_size == \
        zstandard.CONTENTSIZE_UNKNOWN
    out2 = tmp_path / "out2.cwire"
    assert "cap" in _fails(capsys, ["unpack", blind, "-o", out2, "--max-bytes", size - 1],
                           out2)


def test_damaged_packs_are_refused(work, tmp_path, capsys):
    pack = tmp_path / "r2.cwpack"
    assert main(["pack", str(work["r2"]), "-d", str(work["rdict"]), "-o", str(pack)]) == 0
    raw = pack.read_bytes()
    out = tmp_path / "out.cwire"
    for name, data in (("tail", raw + b"\0\0"), ("cut", raw[:-4]), ("not", b"hello world")):
        bad = tmp_path / f"{name}.cwpack"
        bad.write_bytes(data)
        _fails(capsys, ["unpack", bad, "-d", work["rdict"], "-o", out], out)


def test_mixed_profiles_and_bad_inputs(work, tmp_path, capsys):
    out = tmp_path / "mixed.cwdict"
    err = _fails(capsys, ["pack-dict", work["r1"], work["o1"], "-o", out],
                 out, f"{out}.note.toml")
    assert "one dictionary per profile" in err
    # a stream without its profile note
    lone = tmp_path / "lone.cwire"
    lone.write_bytes(work["r1"].read_bytes())
    assert "no profile recorded" in _fails(capsys, ["pack-dict", lone, "-o", out], out)
    assert "no profile recorded" in _fails(capsys, ["pack", lone, "-o", tmp_path / "x"],
                                           tmp_path / "x")
    # a dictionary that no longer matches its note
    changed = tmp_path / "changed.cwdict"
    raw = bytearray(work["rdict"].read_bytes())
    raw[-1] ^= 0xFF
    changed.write_bytes(bytes(raw))
    (tmp_path / "changed.cwdict.note.toml").write_text(
        (work["dir"] / "r.cwdict.note.toml").read_text())
    pack = tmp_path / "b.cwpack"
    assert "SHA-256" in _fails(capsys, ["pack", work["r2"], "-d", changed, "-o", pack],
                               pack)
