"""The time column round-trips exactly: regular, epoch, jittered and irregular clocks.

The reference is the decimal text itself: Python's ``float()`` (correctly rounded
decimal to IEEE 754 double, as the C standard's strtod) of every input cell
must equal the decoded value bit for bit.
"""

import numpy as np
import pytest

from codec._profile import load_stream_note, note_path
from codec._timecol import time_fields, time_values
from codec.cli import main


def _write(path, name, times_text, rng):
    x = np.sin(np.arange(len(times_text)) / 7.0) + 0.01 * rng.normal(size=len(times_text))
    path.write_text(f"{name},x\n" + "".join(f"{t},{v!r}\n" for t, v in
                                             zip(times_text, x.tolist())))


def _roundtrip(tmp_path, name, times_text, capsys):
    rng = np.random.default_rng(5)
    src = tmp_path / "in.csv"
    _write(src, name, times_text, rng)
    assert main(["encode", str(src), "-o", str(tmp_path / "s.cwire")]) == 0
    said = capsys.readouterr().out
    assert main(["decode", str(tmp_path / "s.cwire"), "-o", str(tmp_path / "o.csv")]) == 0
    lines = (tmp_path / "o.csv").read_text().splitlines()
    assert lines[0].split(",")[0] == name
    got = np.array([float(ln.split(",")[0]) for ln in lines[1:]])
    want = np.array([float(t) for t in times_text])
    assert got.tobytes() == want.tobytes()  # bit for bit
    return said, load_stream_note(note_path(tmp_path / "s.cwire"))[1]


def test_epoch_time_is_a_regular_clock_kept_exactly(tmp_path, capsys):
    # 1.7e9 + 0.1 i written as decimal text (epoch seconds at 10 Hz)
    text = [f"{17000000000 + i}"[:-1] + "." + f"{17000000000 + i}"[-1] for i in range(700)]
    said, note = _roundtrip(tmp_path, "time", text, capsys)
    assert "regular clock" in said
    assert note.time_decimals == 1 and note.time_step_ticks == 1


def test_jittered_time_kept_as_ticks(tmp_path, capsys):
    rng = np.random.default_rng(9)
    us = np.arange(700) * 10_000 + rng.integers(-5, 6, 700)  # 100 Hz, a few microseconds jitter
    text = [f"{v // 1_000_000}.{v % 1_000_000:06d}" for v in (us + 1_700_000_000_000_000)]
    said, note = _roundtrip(tmp_path, "t", text, capsys)
    assert "irregular clock" in said and note.time_decimals == 6 and note.time_ticks


def test_time_with_no_decimal_clock_kept_as_doubles(tmp_path, capsys):
    rng = np.random.default_rng(4)
    t = np.cumsum(rng.exponential(0.37, 300))
    said, note = _roundtrip(tmp_path, "time", [repr(float(v)) for v in t], capsys)
    assert "no decimal clock" in said and note.time_float64


def test_notes_written_before_ticks_still_give_start_plus_step():
    class Old:  # the fields an older note carries
        time_start, time_step = 5.0, 0.25

    assert np.array_equal(time_values(Old(), 2, 3), 5.0 + 0.25 * np.array([2, 3, 4]))


@pytest.mark.parametrize("t", [[3.0], [0.5, 0.5, 0.5]])
def test_degenerate_clocks(t):
    f = time_fields(np.array(t))
    class N:
        time_start = None

    note = N()
    for k, v in f.items():
        setattr(note, k, v)
    for k in ("time_float64", "time_ticks", "time_start_ticks"):
        if not hasattr(note, k):
            setattr(note, k, None)
    assert np.array_equal(time_values(note, 0, len(t)), np.array(t))
