"""``coefwire survey``: groups, the link verdict, Dask against serial, error rows, resume.

The tiny archive is cut from a real recording (a six-channel strong-motion
accelerograph at 250 Hz, shipped inside the ``obspy`` package, LGPL-3.0; see
realdata.py): three "stations" with two sessions each.
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from realdata import MOTION_CHANNELS, MOTION_RATE_HZ, motion

from codec import InputError, load_profile
from codec.cli import main
from link_sim import _survey_run
from link_sim._budget import compute_budget
from link_sim._linkfile import link_from_dict
from link_sim._survey import GroupPattern, expand_archive, link_verdict

ROWS_PER_FILE = 100  # 0.4 s of the 250 Hz record per file

LINK = {
    "description": "test link",
    "frequency_hz": 437.0e6, "distance_m": 1.0e6, "tx_power_w": 2.0,
    "tx_antenna_gain_dbi": 2.0, "rx_antenna_gain_dbi": 12.0,
    "system_noise_temperature_k": 500.0, "data_rate_bps": 48000.0, "modulation": "bpsk",
    "fec": "none", "target_ber": 1e-5, "required_margin_db": 3.0,
    "losses_db": {"cable": 2.5},
}

PROFILE = "\n".join(["frame_length = 32", 'basis = "dct"', "fidelity = 0.99", ""] + [
    f'[[channels]]\nname = "{n}"\nsample_rate_hz = {MOTION_RATE_HZ}\n'
    for n in MOTION_CHANNELS])


def _toml(d: dict) -> str:
    lines = [f"{k} = {json.dumps(v)}" for k, v in d.items() if k != "losses_db"]
    lines.append("[losses_db]")
    lines += [f"{k} = {v}" for k, v in d["losses_db"].items()]
    return "\n".join(lines) + "\n"


def _write_csv(path, values):
    t = np.arange(values.shape[0]) / MOTION_RATE_HZ
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(",".join(["time", *MOTION_CHANNELS]) + "\n")
        np.savetxt(fh, np.column_stack([t, values]), delimiter=",", fmt="%.17g")


@pytest.fixture(scope="module")
def archive(tmp_path_factory):
    """Six real recordings as w1..w3 x s1..s2 (one as Parquet), a profile and link files."""
    root = tmp_path_factory.mktemp("archive")
    data = motion("train")
    (root / "rec").mkdir()
    for k, (w, s) in enumerate([(w, s) for w in (1, 2, 3) for s in (1, 2)]):
        values = data[k * ROWS_PER_FILE:(k + 1) * ROWS_PER_FILE]
        if (w, s) == (3, 2):
            cols = {"time": np.arange(ROWS_PER_FILE) / MOTION_RATE_HZ}
            cols |= {n: values[:, i] for i, n in enumerate(MOTION_CHANNELS)}
            pq.write_table(pa.table(cols), root / "rec" / f"w{w}_s{s}.parquet")
        else:
            _write_csv(root / "rec" / f"w{w}_s{s}.csv", values)
    (root / "profile.toml").write_text(PROFILE, encoding="utf-8")
    links = root / "links"
    links.mkdir()
    (links / "w1.link.toml").write_text(_toml(LINK), encoding="utf-8")
    # w2: a slow radio (the rate is set by the test that needs it); w3: too far for its margin.
    (links / "w2.link.toml").write_text(_toml(LINK), encoding="utf-8")
    (links / "w3.link.toml").write_text(_toml({**LINK, "distance_m": 3.0e8}), encoding="utf-8")
    return root


def _args(root, out, *extra):
    return ["survey", str(root / "rec"), "--out", str(out), "-p", str(root / "profile.toml"),
            "--links", str(root / "links"), "--group-by", "{watch}_{period}.*",
            "--bases", "dct", "--fidelity", "0.9,0.99", "--quiet", *extra]


def _rows(out):
    with open(out / "rows.csv", encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="module")
def serial(archive, tmp_path_factory):
    out = tmp_path_factory.mktemp("serial") / "survey"
    assert main(_args(archive, out, "--workers", "1")) == 0
    return out


def test_frame_search_survives_a_view_held_on_its_buffer():
    # Found by the survey on Dask: a worker's sampling profiler can hold a frame, and with it a
    # slice of the frame scanner's buffer, for a moment; a bytearray with a live view cannot
    # be resized (CPython raises BufferError), so the scanner must not rely on that.
    from streams import real_stream

    from codec.stream.search import FrameScanner, locate_frames

    _, enc = real_stream(600, 3)
    data = enc.data
    whole = locate_frames(data)
    scan = FrameScanner()
    half = len(data) // 2
    found = scan.feed(data[:half])
    held = memoryview(scan._buf)  # what the profiler's frame keeps alive
    found += scan.feed(data[half:]) + scan.close()
    held.release()
    assert [f for _, f in found] == whole.frames
    # The frames themselves, cut out of the stream by their offsets (independent slicing).
    assert [data[o:o + len(f)] for o, f in found] == whole.frames


def test_group_pattern_names_groups_and_periods():
    p = GroupPattern("{station}_{date}.csv")
    assert p.match("data/ridge01_2026-03-10.csv") == ("ridge01", "2026-03-10")
    assert p.match("a_b_2026.csv") == ("a", "b_2026")  # fields match the shortest run first
    with pytest.raises(InputError, match="does not match"):
        p.match("ridge01.npy")
    with pytest.raises(InputError, match="only period fields"):
        GroupPattern("{date}.csv")


def test_rows_cover_every_file_channel_basis_and_fidelity(serial):
    rows = _rows(serial)
    files = {r["file"] for r in rows}
    assert len(files) == 6 and all(r["error"] == "" for r in rows)
    # one row per file x (6 channels + all) x (identity, dct) x (0.9, 0.99)
    assert len(rows) == 6 * 7 * 2 * 2
    # bits per day = bits / duration x 86400 s, the duration from the rows and the 250 Hz rate
    # of the record (its EVT header, as obspy reads it).
    for r in rows[:28]:
        assert float(r["duration_s"]) == pytest.approx(ROWS_PER_FILE / MOTION_RATE_HZ)
        seconds = ROWS_PER_FILE / 250.0
        assert float(r["bits_per_day"]) == pytest.approx(float(r["bits"]) / seconds * 86400.0)
    # One profile per sensor class, loadable, naming the basis with the fewest bits over the
    # fleet at the fleet's fidelity (summed here from the CSV rows).
    summary = json.loads((serial / "summary.json").read_text(encoding="utf-8"))
    fleet_f = summary["fleet_fidelity"]
    for c in MOTION_CHANNELS:
        prof = load_profile(serial / "profiles" / f"{c}.toml")
        per = {}
        for r in rows:
            if r["channel"] == c and float(r["fidelity_target"]) == fleet_f:
                per[r["basis"]] = per.get(r["basis"], 0.0) + float(r["bits"])
        assert prof.basis == min(per, key=per.get) and prof.fidelity == fleet_f
        assert [ch.name for ch in prof.channels] == [c]
    # The Parquet dataset holds the same rows as the CSV (read back by pyarrow).
    table = pq.read_table(serial / "rows")
    assert table.num_rows == len(rows)
    assert sorted(table.column("bits").to_pylist()) == sorted(float(r["bits"]) for r in rows)


def test_link_verdict_rate_and_margin_rules():
    budget = compute_budget(link_from_dict(LINK, "test"))
    # C/N0 by hand (textbook chain, k = 1.380649e-23 J/K exact since SI 2019):
    # EIRP = 10 log10(2) + 2; FSPL = 20 log10(4 pi d f / c); G/T = 12 - 10 log10(500).
    fspl = 20 * math.log10(4 * math.pi * 1.0e6 * 437.0e6 / 299_792_458.0)
    cn0 = 10 * math.log10(2.0) + 2.0 - fspl - 2.5 + 12.0 - 10 * math.log10(500.0) \
        - 10 * math.log10(1.380649e-23)
    # Uncoded BPSK at BER 1e-5 needs Eb/N0 = 9.59 dB (Proakis, Digital Communications, 4.3;
    # the usual textbook figure "9.6 dB", value from memory).
    margin = cn0 - 10 * math.log10(48000.0) - 9.59
    ok = link_verdict(budget, 1000.0)
    assert ok.margin_db == pytest.approx(margin, abs=0.01)
    assert ok.fits and ok.limited_by is None and ok.on_air_bps == 1000.0  # uncoded: rate 1
    fast = link_verdict(budget, 48001.0)  # more bits on air than the radio sends
    assert not fast.fits and fast.limited_by == "rate"
    far = compute_budget(link_from_dict({**LINK, "distance_m": 3.0e8}, "far"))
    weak = link_verdict(far, 1.0)  # a trickle, but the radio itself misses its margin
    assert not weak.fits and weak.limited_by == "margin"


def test_summary_picks_the_highest_fidelity_that_fits(archive, serial, tmp_path):
    rows = [r for r in _rows(serial) if r["group"] == "w2" and r["channel"] != "all"]

    def stream_bps(f):  # each channel with its cheapest basis over the group's files
        best = {}
        for c in MOTION_CHANNELS:
            sel = [r for r in rows if r["channel"] == c and float(r["fidelity_target"]) == f]
            per = {}
            for r in sel:
                per[r["basis"]] = per.get(r["basis"], 0.0) + float(r["bits"])
            best[c] = min(per.values())
        return sum(best.values()) / (2 * ROWS_PER_FILE / 250.0)  # two files of 0.4 s

    low, high = stream_bps(0.9), stream_bps(0.99)
    assert low < high
    # Give w2 a radio between the two rates: 0.9 fits, 0.99 is limited by the rate.
    archive2 = tmp_path / "a"
    (archive2 / "links").mkdir(parents=True)
    (archive2 / "rec").symlink_to(archive / "rec")
    (archive2 / "profile.toml").write_text(PROFILE, encoding="utf-8")
    for w in ("w1", "w3"):
        (archive2 / "links" / f"{w}.link.toml").write_text(
            (archive / "links" / f"{w}.link.toml").read_text(encoding="utf-8"), encoding="utf-8")
    (archive2 / "links" / "w2.link.toml").write_text(
        _toml({**LINK, "data_rate_bps": math.sqrt(low * high)}), encoding="utf-8")
    out = tmp_path / "s"
    assert main(_args(archive2, out, "--workers", "1")) == 0
    groups = {g["group"]: g for g in json.loads((out / "summary.json").read_text())["groups"]}
    assert groups["w1"]["fits"] and groups["w1"]["fidelity"] == 0.99
    assert groups["w1"]["limited_by"] is None
    assert groups["w2"]["fits"] and groups["w2"]["fidelity"] == 0.9
    assert groups["w2"]["limited_by"] == "rate"
    assert groups["w2"]["stream_bps"] == pytest.approx(low)
    assert not groups["w3"]["fits"] and groups["w3"]["limited_by"] == "margin"


def test_local_cluster_of_two_workers_gives_exactly_the_serial_rows(archive, serial, tmp_path):
    # Issue 17: the same survey on a distributed.LocalCluster of 2 workers, submitted by
    # address as to any running cluster, gives exactly the rows of the serial run.
    from distributed import LocalCluster

    out = tmp_path / "dask"
    # scheduler and dashboard on free ports: the default dashboard port (8787) may be held
    # by any other cluster on the machine, and its warning is an error in the tests
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, scheduler_port=0,
                      dashboard_address=":0") as cluster:
        assert main(_args(archive, out, "--scheduler", cluster.scheduler_address)) == 0
    assert (out / "rows.csv").read_bytes() == (serial / "rows.csv").read_bytes()
    a = pq.read_table(out / "rows").to_pylist()
    b = pq.read_table(serial / "rows").to_pylist()
    key = lambda r: (r["file"], r["channel"], r["basis"], r["fidelity_target"])  # noqa: E731
    assert sorted(a, key=key) == sorted(b, key=key)
    assert (out / "groups.csv").read_bytes() == (serial / "groups.csv").read_bytes()


def test_a_corrupt_file_is_an_error_row_and_the_rest_is_kept(archive, serial, tmp_path):
    rec = tmp_path / "rec"
    rec.mkdir()
    for p in (archive / "rec").iterdir():
        (rec / p.name).write_bytes(p.read_bytes())
    text = (rec / "w1_s2.csv").read_text(encoding="utf-8").splitlines()
    text[5] = text[5].replace(",", ",x#", 1)  # a garbled cell on line 6
    (rec / "w1_s2.csv").write_text("\n".join(text) + "\n", encoding="utf-8")
    (rec / "w2_s3.parquet").write_bytes(b"PAR1 this is not parquet")
    out = tmp_path / "s"
    args = _args(archive, out, "--workers", "1")
    args[1] = str(rec)
    assert main(args) == 1  # a failed file is reported in the exit status, not raised
    rows = _rows(out)
    errors = {r["file"].rsplit("/", 1)[-1]: r["error"] for r in rows if r["error"]}
    assert set(errors) == {"w1_s2.csv", "w2_s3.parquet"}
    assert "line 6" in errors["w1_s2.csv"] and "not a number" in errors["w1_s2.csv"]
    assert "not a readable Parquet file" in errors["w2_s3.parquet"]
    good = [r for r in rows if not r["error"]]
    assert len(good) == 5 * 28
    ref = {(r["file"].rsplit("/", 1)[-1], r["channel"], r["basis"], r["fidelity_target"]):
           r["bits"] for r in _rows(serial)}
    for r in good:
        assert ref[(r["file"].rsplit("/", 1)[-1], r["channel"], r["basis"],
                    r["fidelity_target"])] == r["bits"]


def test_resume_after_an_interruption_recomputes_nothing_finished(archive, serial, tmp_path,
                                                                  monkeypatch):
    real = _survey_run.survey_file
    calls = []

    def interrupted(item, settings):
        if len(calls) == 3:
            raise KeyboardInterrupt  # as if Ctrl-C arrived during the fourth file
        calls.append(item.path)
        return real(item, settings)

    monkeypatch.setattr(_survey_run, "survey_file", interrupted)
    out = tmp_path / "s"
    assert main(_args(archive, out, "--workers", "1")) == 130
    kept = sorted((out / "rows").glob("part-*.parquet"))
    assert len(kept) == 3
    stamps = {p: p.stat().st_mtime_ns for p in kept}
    assert not (out / "rows.csv").exists()  # no summary from half an archive

    done, calls2 = set(calls), []

    def counting(item, settings):
        calls2.append(item.path)
        return real(item, settings)

    monkeypatch.setattr(_survey_run, "survey_file", counting)
    assert main(_args(archive, out, "--workers", "1")) == 2  # refused without --resume
    assert main(_args(archive, out, "--workers", "1", "--resume")) == 0
    assert len(calls2) == 3 and not done & set(calls2)
    assert all(p.stat().st_mtime_ns == t for p, t in stamps.items())
    assert (out / "rows.csv").read_bytes() == (serial / "rows.csv").read_bytes()
    # Other settings cannot resume this folder.
    other = _args(archive, out, "--workers", "1", "--resume")
    other[other.index("0.9,0.99")] = "0.95"
    assert main(other) == 2


def test_archive_errors_are_one_sentence(archive, tmp_path, capsys):
    with pytest.raises(InputError, match="no file matches"):
        expand_archive([str(tmp_path / "*.csv")], None)
    bad = _args(archive, tmp_path / "s", "--workers", "1")
    bad[bad.index("--links") + 1] = str(tmp_path)
    assert main(bad) == 2
    err = capsys.readouterr().err
    assert "no link file for group(s) w1, w2, w3" in err and "Traceback" not in err
    assert not (tmp_path / "s").exists()


# --- the page -----------------------------------------------------------------------------

_URL_ATTRS = ("src", "href", "srcset", "poster", "data", "action", "formaction", "background",
              "cite", "longdesc", "manifest", "xlink:href")


def test_report_parses_as_html5_and_fetches_nothing(serial, tmp_path):
    import html5lib

    page = tmp_path / "page.html"
    assert main(["report", str(serial), "-o", str(page)]) == 0
    text = page.read_text(encoding="utf-8")
    # html5lib (a reference implementation of the WHATWG HTML parsing algorithm) in strict
    # mode raises on any parse error.
    doc = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(text)
    tags = [el.tag for el in doc.iter()]
    assert "script" not in tags and "link" not in tags and "iframe" not in tags
    imgs = [el for el in doc.iter() if el.tag == "img"]
    assert len(imgs) >= 3
    for el in doc.iter():
        for name, value in el.attrib.items():
            if name in _URL_ATTRS:
                assert value.startswith(("data:", "#")), (el.tag, name, value[:60])
    for img in imgs:
        assert len(img.get("alt", "")) > 20  # a real description, not a file name
    style = "".join(el.text or "" for el in doc.iter() if el.tag == "style")
    assert "@import" not in style and "url(" not in style
    table = next(el for el in doc.iter() if el.get("id") == "summary-table")
    cells = ["".join(td.itertext()) for td in table.iter("td")]
    assert cells.count("fits") == 2 and cells.count("does not fit") == 1  # w3 is too far
    assert (serial / "report.html").read_text(encoding="utf-8") == text  # survey wrote it too


def _pixels(png):
    import matplotlib.image as mpimg

    return (mpimg.imread(png)[:, :, :3] * 255).round().astype(int)


def test_chromium_renders_the_page_with_its_summary_table(archive, tmp_path):
    import shutil
    import subprocess

    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("headless Chromium is not installed here (Debian package 'chromium'; "
                    ".ci/run installs it where apt-get can)")
    out = tmp_path / "s"
    assert main(_args(archive, out, "--workers", "1")) == 0
    png = tmp_path / "page.png"
    run = subprocess.run(
        [browser, "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
         f"--user-data-dir={tmp_path / 'profile'}", "--window-size=1200,1400",
         f"--screenshot={png}", (out / "report.html").as_uri()],
        capture_output=True, timeout=180, check=False)
    assert run.returncode == 0 and png.is_file(), run.stderr[-2000:]
    px = _pixels(png)
    assert px.shape[0] == 1400 and px.shape[1] == 1200
    assert px.std() > 20  # not a blank page
    # The summary table's verdict cells: "fits" on #d9efdf and "does not fit" on #fbe0de
    # (the page's own colours; nothing else on the page is painted in them).
    def count(rgb):
        return int(np.all(np.abs(px - np.array(rgb)) <= 2, axis=2).sum())

    assert count((0xD9, 0xEF, 0xDF)) > 500  # w1, w2 fit
    assert count((0xFB, 0xE0, 0xDE)) > 250  # w3 does not
    assert count((0xE8, 0xED, 0xF2)) > 2000  # the table's header row
