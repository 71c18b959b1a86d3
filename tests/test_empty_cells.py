"""Empty CSV cells are missing values, handled by --gaps (RFC 4180 allows empty fields)."""

import io
import subprocess
import sys

import numpy as np
import pytest
from checks import assert_meets_target
from realdata import motion

from codec import Profile, decode, encode
from codec._io import CsvBlockReader, read_samples
from codec.cli import main

TEXT = "time,a,b\n0,1.5,2\n1,,3\n2,4, \n3,5,6\n4,5.5,6.5\n"


def test_empty_cells_read_as_missing_values(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text(TEXT)
    t = read_samples(src, allow_gaps=True)
    assert np.isnan(t.values[1, 0]) and np.isnan(t.values[2, 1])
    assert np.isfinite(t.values).sum() == t.values.size - 2
    # the live reader agrees
    r = CsvBlockReader(io.BytesIO(TEXT.encode()))
    values = np.concatenate([v for v, _ in r.blocks()])
    assert np.array_equal(np.isnan(values), np.isnan(t.values))


def test_refused_missing_value_names_the_gaps_option(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text(TEXT)
    proc = subprocess.run([sys.executable, "-m", "codec.cli", "encode", str(src), "-o",
                           str(tmp_path / "s.cwire")], capture_output=True, text=True)
    assert proc.returncode == 2
    assert "line 3, column 'a'" in proc.stderr and "--gaps" in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "s.cwire").exists()


def test_marked_empty_cells_come_back_as_nan(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text(TEXT)
    s = tmp_path / "s.cwire"
    assert main(["encode", str(src), "-o", str(s), "--gaps", "mark", "--frame-length", "4"]) == 0
    assert main(["decode", str(s), "-o", str(tmp_path / "o.csv")]) == 0
    out = np.genfromtxt(tmp_path / "o.csv", delimiter=",", skip_header=1)
    assert np.array_equal(np.isnan(out[:, 1:]), np.isnan(read_samples(src, True).values))


@pytest.mark.parametrize("multi", [False, True])
@pytest.mark.parametrize("layout", [3, 4])
def test_marked_gaps_keep_header_sharing_elsewhere(multi, layout):
    # Real recordings (an accelerograph record shipped in obspy, LGPL-3.0) with short gaps.
    x = motion("train")[:2048, :4].copy()
    rng = np.random.default_rng(12)
    for start in rng.choice(x.shape[0] - 3, 6, replace=False):
        x[start : start + 1 + start % 3, start % 4] = np.nan
    prof = Profile(frame_length=64, layout_version=layout, multi_channel_frames=multi)
    enc = encode(x, prof, gaps="mark")
    dec = decode(enc.data, enc.profile, samples=x.shape[0])
    assert np.array_equal(np.isnan(dec.samples), np.isnan(x))  # gaps come back exactly
    ok = ~np.isnan(x)
    # The coder saw linear interpolation at the gaps (numpy.interp as the reference); the
    # error there is left out (zero), so every frame must still meet its target.
    i = np.arange(x.shape[0])
    filled = np.column_stack([np.interp(i, i[ok[:, c]], x[ok[:, c], c]) for c in range(4)])
    assert_meets_target(filled, np.where(ok, dec.samples, filled), enc.profile)
    # Windows without a gap still share frames: far fewer frames than windows x channels.
    windows = -(-x.shape[0] // 64)
    rows = windows * (1 if multi else 4)
    assert enc.report["frames_on_wire"] < rows / 2
