"""Golden JSON key lists: every key path of every command's JSON report, as released.

The keys of the JSON reports are a contract that users' scripts rely on
(README, "JSON reports"; the project rule: add keys, never rename or drop
one).  Each command is run through the real command line on a small slice of
the shipped demo data and the set of key paths of its JSON is compared with a
list written here, recorded from the reports of commit 5103b71 (the contract
as it stood before the reports were gathered into ``codec/report.py``).  A key
added, dropped or renamed fails the test with the difference spelled out;
a deliberate addition is made by adding it to the list below.

Key paths: ``a.b`` for a nested object, ``a[].b`` for the objects of a list,
and ``a{}.b`` for an object whose keys are data (channel names, status codes,
file paths), so the contract does not depend on the channels of the input.
Keys that appear only when something happens (decode events, gap frames,
stuffing) are outside these clean runs.
"""

from __future__ import annotations

import contextlib
import io
import json
from importlib.resources import files
from pathlib import Path

import pytest
from streams import receive_over_loopback

import codec
from codec.cli import main

ROOT = Path(__file__).resolve().parents[1]
#: Objects whose keys are data, not contract (channel names, status codes, paths).
DATA_KEYED = {"per_channel", "units", "status_codes", "per_channel_end_to_end", "links",
              "profiles"}


def key_paths(obj, prefix: str = "") -> set[str]:
    """Every key path of a JSON value (see the module docstring for the notation)."""
    out: set[str] = set()
    if isinstance(obj, dict):
        data_keyed = prefix.rsplit(".", 1)[-1].removesuffix("[]") in DATA_KEYED
        for k, v in obj.items():
            path = (f"{prefix}{{}}" if data_keyed else f"{prefix}.{k}" if prefix else k)
            out.add(path)
            out |= key_paths(v, path)
    elif isinstance(obj, list):
        for v in obj:
            out |= key_paths(v, prefix + "[]")
    return out


def assert_keys(report, golden: list[str]) -> None:
    """The report's key paths are exactly the golden list (the difference named if not)."""
    got, want = key_paths(report), set(golden)
    assert len(golden) == len(want), "the golden list repeats a key"
    added, dropped = sorted(got - want), sorted(want - got)
    assert not added and not dropped, f"JSON keys added: {added}; dropped: {dropped}"


def _run(argv) -> int:
    with contextlib.redirect_stdout(io.StringIO()):
        return main(argv)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """300 rows of the shipped ridge_station demo (six channels with units) and its profile."""
    root = tmp_path_factory.mktemp("keys")
    rows = (files("codec") / "data" / "ridge_station.csv").read_text().splitlines()[:301]
    (root / "in.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    profile = root / "p.toml"
    profile.write_text((files("codec") / "data" / "ridge_station.toml").read_text(),
                       encoding="utf-8")
    assert _run(["encode", str(root / "in.csv"), "-o", str(root / "s.cw"), "-p", str(profile),
                 "--json", str(root / "encode.json")]) == 0
    return root


def _json(path: Path):
    return json.loads(path.read_text(encoding="utf-8"))


# ---- golden lists (recorded at 5103b71) -------------------------------------------------------

#: Figures of one channel (and of the whole stream) in the encode and roundtrip reports.
_FIGURES = ["bits_per_frame_mean", "bits_per_sample", "bits_total", "compression_ratio",
            "error_energy", "fidelity_mean", "fidelity_min", "fidelity_target", "frames",
            "frames_at_floor", "frames_below_target", "max_abs_error", "prd_percent",
            "prdn_percent", "raw_bits_per_sample", "samples", "snr_ac_db", "snr_db"]

ENCODE = _FIGURES + [
    "basis", "blocks_at_floor", "blocks_below_target", "budget_blocks", "channels",
    "fidelity_scope", "frame_length", "frames_on_wire", "frames_trellis", "gap_policy",
    "header_bits_per_sample", "layout_version", "reference", "samples_gap",
    "window_fidelity_min", "units", "units{}", "per_channel", "per_channel{}",
] + [f"per_channel{{}}.{k}" for k in _FIGURES] + [
    "per_frame", "per_frame.at_floor", "per_frame.bits", "per_frame.block_fidelity",
    "per_frame.budget_block", "per_frame.channel", "per_frame.fidelity", "per_frame.met",
    "per_frame.step", "per_frame.terms", "per_frame.window",
    "time_column", "time_column.kept", "time_column.name", "time_column.resolution",
]

ROUNDTRIP = [k for k in ENCODE if not k.startswith("time_column")] + ["decoded_check"]

#: Frames refused by reason: added after 5103b71, where each appeared only once such a frame
#: had arrived (the decoder's counts are now one fixed record, zero when none was refused).
REFUSED = [f"frames_{why}" for why in ("foreign_profile", "bad_header", "duplicate", "conflict",
                                        "late", "beyond_end", "before_start")]

DECODE = [
    "bits_total", "bytes_in", "bytes_skipped", "channels", "discontinuities", "end_known",
    "events", "events_listed", "frames_crc_failed", "frames_ok", "gap_frames_ok", "samples",
    "samples_check", "samples_concealed", "samples_delivered", "samples_gap", "samples_lost",
    "windows_cut", "status_codes", "status_codes{}", "units", "units{}",
    "per_channel", "per_channel{}", "per_channel{}.samples_concealed",
    "per_channel{}.samples_delivered", "per_channel{}.samples_gap", "per_channel{}.samples_lost",
] + REFUSED

COMPARE = ["fidelity_scope", "frame_length", "input", "scoring", "test_samples", "train_samples",
           "units", "units{}", "rows"] + [f"rows[].{k}" for k in (
               "basis", "bits_per_frame_mean", "bits_per_frame_p95", "bits_per_sample",
               "bits_saved_percent", "channel", "compression_ratio", "encode_seconds",
               "fidelity_mean", "fidelity_min", "fidelity_scope", "fidelity_target",
               "frames_at_floor", "frames_below_target", "max_abs_error", "prd_percent",
               "snr_db", "winner")]

PACK = ["bits_saved", "channels", "dictionary_bytes", "dictionary_sha256", "frames", "pack_bits",
        "pack_bits_per_sample", "pack_written", "per_frame_bits", "per_frame_bits_per_sample",
        "samples", "saved_percent", "verdict", "zstd_dictionary_id"]

BUDGET = [
    "budget_lines", "budget_lines[].item", "budget_lines[].source", "budget_lines[].unit",
    "budget_lines[].value", "cautions", "channel_bit_rate_bps", "cn0_dbhz", "code_rate",
    "data_rate_bps", "description", "distance_m", "ebn0_db", "eirp_dbw", "fit_conditions",
    "fit_conditions.margin", "fit_conditions.pass_volume", "fit_conditions.rate", "fits",
    "fspl_db", "g_over_t_db_k", "link_file", "margin_db", "max_data_rate_bps",
    "packet_overhead_bits", "pass", "radio_on_air_bps", "received_power_dbw",
    "required_ebn0_db", "required_ebn0_source", "required_margin_db",
    "system_noise_temperature_k",
]

BUDGET_WITH_INPUT = BUDGET + [
    "best_fidelity", "best_fidelity_reason", "input", "sample_rate_hz", "sample_rate_source",
    "fidelity_rows"] + [f"fidelity_rows[].{k}" for k in (
        "bits_per_frame_mean", "bits_per_second", "bits_total", "channel_bits_per_second",
        "failed_conditions", "fidelity", "fidelity_scope", "fits", "frames_per_second",
        "limited_by", "margin_db", "radio_on_air_bps", "snr_db", "spare_on_air_bps",
        "spare_percent")]

#: Figures of ``simulate`` that come with a 95 % interval (``KEY_ci95``).
_SIM_CI = ["ber_channel", "ber_post_fec", "codewords", "codewords_failed",
           "fidelity_delivered", "fidelity_end_to_end", "frame_error_rate", "frames_delivered",
           "frames_dropped_crc", "frames_erased", "frames_out_of_range",
           "frames_rejected_header", "frames_sent", "frames_undetected_errors",
           "max_abs_error_delivered", "max_abs_error_end_to_end", "samples_concealed",
           "samples_delivered", "samples_in", "samples_lost", "samples_out_of_range",
           "snr_db_delivered", "snr_db_end_to_end"]

SIMULATE = _SIM_CI + [f"{k}_ci95" for k in _SIM_CI] + [
    "ber_channel_theory", "bits_codec", "bits_codec_per_frame", "bits_codec_per_sample",
    "bits_fec_overhead", "bits_on_air", "bits_on_air_per_frame", "bits_on_air_per_sample",
    "channel", "conceal", "ebn0_db", "fec", "fidelity_end_to_end_counts",
    "frame_error_rate_theory", "interleave", "modulation", "seed", "snr_db_codec_only",
    "trials", "units", "units{}", "per_channel_end_to_end", "per_channel_end_to_end{}",
] + [f"per_channel_end_to_end{{}}.{k}" for k in (
    "bits_codec_per_sample", "fidelity_end_to_end", "max_abs_error", "prd_percent",
    "samples_lost", "snr_ac_db", "snr_db")]

SEND = ["average_bps", "bits", "counted", "frames", "rate_bps", "rate_error_percent", "seconds"]

RECEIVE = ["bytes_in", "bytes_skipped", "channels", "datagrams", "discontinuities", "end_known",
           "events", "events_listed", "frames_crc_failed", "frames_ok", "gap_frames_ok",
           "samples", "samples_concealed", "samples_delivered", "samples_gap", "samples_lost",
           "seconds", "stopped", "windows_cut", "units", "units{}", "per_channel",
           "per_channel{}"] + REFUSED + [f"per_channel{{}}.{k}" for k in (
               "samples_delivered", "samples_lost", "samples_gap", "samples_concealed",
               "delivered_min", "delivered_max")]

_PROFILE = ["basis", "basis_file", "basis_sha256", "channels", "description", "fidelity",
            "fidelity_scope", "frame_length",
            "layout_version", "multi_channel_frames", "reference", "windows_per_frame"]
_CHANNEL = ["max_error", "name", "raw_bits_per_sample", "resolution", "sample_rate_hz", "unit",
            "valid_max", "valid_min"]
_BUDGET_FIGURES = [
    "channel_bit_rate_bps", "cn0_dbhz", "code_rate", "data_rate_bps", "distance_m", "ebn0_db",
    "eirp_dbw", "fits", "fspl_db", "g_over_t_db_k", "margin_db", "max_data_rate_bps",
    "received_power_dbw", "required_ebn0_db", "required_ebn0_source", "required_margin_db",
    "system_noise_temperature_k"]

SURVEY = [
    "cautions", "errors", "files", "files_failed", "fleet_fidelity", "inputs", "missing",
    "curves", "curves[].basis", "curves[].bits_per_day", "curves[].channel",
    "curves[].fidelity",
    "examples", "examples[].basis", "examples[].channel", "examples[].decoded",
    "examples[].fidelity", "examples[].file", "examples[].max_abs_error",
    "examples[].original", "examples[].resolution", "examples[].snr_db", "examples[].time_s",
    "group_channels", "group_channels[].basis", "group_channels[].bits_per_day",
    "group_channels[].channel", "group_channels[].fidelity_target",
    "group_channels[].frames_below_target", "group_channels[].group",
    "groups", "groups[].by_fidelity", "groups[].by_fidelity[].bits_per_day",
    "groups[].by_fidelity[].fidelity", "groups[].by_fidelity[].fits",
    "groups[].by_fidelity[].limited_by",
] + [f"groups[].{k}" for k in (
    "bits_per_day", "data_rate_bps", "days", "fidelity", "files", "files_failed", "fits",
    "frames_below_target", "group", "limited_by", "link_description", "link_file", "margin_db",
    "on_air_bps", "required_margin_db", "stream_bps")] + [
    "links", "links{}", "links{}.description", "links{}.distance_m", "links{}.figures",
    "links{}.lines", "links{}.lines[].item", "links{}.lines[].source", "links{}.lines[].unit",
    "links{}.lines[].value"] + [f"links{{}}.figures.{k}" for k in _BUDGET_FIGURES] + [
    "profiles", "profiles{}", "sensor_classes"] + [f"sensor_classes[].{k}" for k in (
        "basis", "bits_per_day_per_station", "bits_saved_percent", "channel", "fidelity",
        "files", "frames_below_target", "max_abs_error", "snr_db_min")] + [
    "settings", "settings.bases", "settings.fidelities", "settings.group_by",
    "settings.profile"] + [f"settings.profile.{k}" for k in _PROFILE] + [
    f"settings.profile.channels[].{k}" for k in _CHANNEL]


# ---- the checks -------------------------------------------------------------------------------

def test_key_paths_notice_an_added_a_dropped_and_a_renamed_key():
    # The comparison itself: the golden list of a tiny report against edited copies.
    report = {"frames": 3, "per_channel": {"a": {"snr_db": 1.0}}, "rows": [{"x": 1}]}
    golden = ["frames", "per_channel", "per_channel{}", "per_channel{}.snr_db", "rows",
              "rows[].x"]
    assert_keys(report, golden)
    renamed = {"frames": 3, "per_channel": {"a": {"snr": 1.0}}, "rows": [{"x": 1}]}
    with pytest.raises(AssertionError, match=r"added: \['per_channel\{\}.snr'\]; dropped: "
                       r"\['per_channel\{\}.snr_db'\]"):
        assert_keys(renamed, golden)
    with pytest.raises(AssertionError, match="added"):
        assert_keys({**report, "extra": 1}, golden)
    with pytest.raises(AssertionError, match=r"dropped: \['frames'\]"):
        assert_keys({k: v for k, v in report.items() if k != "frames"}, golden)


def test_encode_keys(demo):
    assert_keys(_json(demo / "encode.json"), ENCODE)


def test_decode_keys(demo, tmp_path):
    out = tmp_path / "d.json"
    assert _run(["decode", str(demo / "s.cw"), "-o", str(tmp_path / "d.csv"),
                 "--json", str(out)]) == 0
    assert_keys(_json(out), DECODE)


def test_stuffed_decode_keys(demo, tmp_path):
    # a SLIP-stuffed stream adds what the unstuffer counted
    stuffed = tmp_path / "slip.cw"
    assert _run(["encode", str(demo / "in.csv"), "-o", str(stuffed), "-p", str(demo / "p.toml"),
                 "--stuffing", "slip"]) == 0
    out = tmp_path / "d.json"
    assert _run(["decode", str(stuffed), "-o", str(tmp_path / "d.csv"), "--json", str(out)]) == 0
    assert_keys(_json(out), DECODE + ["stuffing", "packets_bad", "packets_overlong"])


def test_decode_event_keys(demo, tmp_path):
    # A frame sent twice: the second copy is refused as a duplicate and listed as an event
    # (each event lists only the keys that apply to it; a duplicate names its place).
    data = (demo / "s.cw").read_bytes()
    first = codec.locate_frames(data)
    dup = tmp_path / "dup.cw"
    dup.write_bytes(data + data[: int(first.lengths[0])])
    (tmp_path / "dup.cw.profile.toml").write_bytes((demo / "s.cw.profile.toml").read_bytes())
    out = tmp_path / "d.json"
    assert _run(["decode", str(dup), "-o", str(tmp_path / "d.csv"), "--json", str(out)]) == 0
    report = _json(out)
    assert report["frames_duplicate"] >= 1  # one per window the copy carries
    assert_keys(report, DECODE + ["events[].event", "events[].offset", "events[].window",
                                  "events[].channel"])


def test_roundtrip_keys(demo, tmp_path):
    out = tmp_path / "r.json"
    assert _run(["roundtrip", str(demo / "in.csv"), "-p", str(demo / "p.toml"),
                 "--json", str(out)]) == 0
    assert_keys(_json(out), ROUNDTRIP)


def test_compare_keys(demo, tmp_path):
    out = tmp_path / "c.json"
    assert _run(["compare", str(demo / "in.csv"), "-p", str(demo / "p.toml"), "--bases",
                 "dct,haar", "--fidelity", "0.9,0.99", "--json", str(out)]) in (0, 1)
    assert_keys(_json(out), COMPARE)


def test_pack_keys(demo, tmp_path):
    # unpack writes no JSON (it prints one line); pack's report is the contract here
    out = tmp_path / "k.json"
    assert _run(["pack", str(demo / "s.cw"), "-o", str(tmp_path / "s.pack"),
                 "--json", str(out)]) == 0
    assert_keys(_json(out), PACK)


def test_budget_keys(demo, tmp_path):
    link = ROOT / "profiles" / "ridge_station.link.toml"
    out = tmp_path / "b.json"
    assert _run(["budget", str(link), "--json", str(out)]) == 0
    assert_keys(_json(out), BUDGET)
    assert _run(["budget", str(link), "--input", str(demo / "in.csv"), "-p", str(demo / "p.toml"),
                 "--json", str(out)]) == 0
    assert_keys(_json(out), BUDGET_WITH_INPUT)


def test_simulate_keys(demo, tmp_path):
    out = tmp_path / "s.json"
    assert _run(["simulate", str(demo / "in.csv"), "-p", str(demo / "p.toml"),
                 "--json", str(out)]) == 0
    assert_keys(_json(out), SIMULATE)
    # a sweep writes a list of such rows
    assert _run(["simulate", str(demo / "in.csv"), "-p", str(demo / "p.toml"), "--ebn0",
                 "4:6:2", "--json", str(out)]) == 0
    rows = _json(out)
    assert isinstance(rows, list) and len(rows) == 2
    for row in rows:
        assert_keys(row, SIMULATE)


def test_send_and_receive_keys(demo, tmp_path):
    # 'receive' in its own process (it installs signal handlers), on loopback only; the
    # test waits for its "listening on" line (readiness, not a fixed sleep), then sends.
    rx_json, tx_json = tmp_path / "rx.json", tmp_path / "tx.json"
    receive_over_loopback(demo / "s.cw", tmp_path / "rx.csv", ("--json", str(rx_json)),
                          ("--json", str(tx_json)))
    assert_keys(_json(tx_json), SEND)
    assert_keys(_json(rx_json), RECEIVE)


def test_survey_keys(tmp_path):
    # two days of one station of the shipped demo fleet, one basis, one target, in process
    fleet = ROOT / "profiles" / "fleet"
    arch = tmp_path / "arch"
    arch.mkdir()
    for name in ("ridge01_2026-03-10.csv", "ridge01_2026-03-11.csv"):
        (arch / name).write_bytes((fleet / "archive" / name).read_bytes())
    out = tmp_path / "survey"
    assert _run(["survey", str(arch), "--out", str(out), "-p", str(fleet / "ridge_fleet.toml"),
                 "--link", str(ROOT / "profiles" / "ridge_station.link.toml"), "--bases", "dct",
                 "--fidelity", "0.99", "--workers", "1", "--quiet"]) == 0
    assert_keys(_json(out / "summary.json"), SURVEY)
