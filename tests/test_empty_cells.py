"""Empty CSV cells are missing values, handled by --gaps (RFC 4180 allows empty fields)."""

import io
import subprocess
import sys

import numpy as np

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
