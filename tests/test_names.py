"""The product's names: no old product name, old extensions or the retired feature word.

The strings searched for are assembled from pieces so that this file does not
match its own search.
"""

import re
import subprocess
from pathlib import Path

import pytest

from codec.cli import main

ROOT = Path(__file__).resolve().parents[1]

_OLD = [
    "trim" + "link",       # the product's former name
    r"\.t" + "lk" + r"\b",  # former stream extension (a game engine's file type)
    r"\.t" + "lz" + r"\b",  # former pack extension (lzip-compressed tar archives)
    "bun" + "dle",         # the delay-tolerant networking data unit's name
]


def _tracked_files() -> list[Path]:
    try:
        out = subprocess.run(["git", "ls-files", "-z"], cwd=ROOT, capture_output=True,
                             check=True).stdout
    except (OSError, subprocess.CalledProcessError):
        pytest.skip("not a git checkout: the tracked files cannot be listed")
    return [ROOT / name for name in out.decode().split("\0") if name]


def test_no_old_names_in_tracked_files():
    pattern = re.compile("|".join(_OLD), re.IGNORECASE)
    hits = []
    for path in _tracked_files():
        rel = path.relative_to(ROOT).as_posix()
        if pattern.search(rel):
            hits.append(f"{rel} (file name)")
        if not path.is_file():
            continue
        text = path.read_bytes().decode("utf-8", errors="replace")
        hits += [f"{rel}:{text.count(chr(10), 0, m.start()) + 1}: {m.group(0)}"
                 for m in pattern.finditer(text)]
    assert not hits, "old names remain:\n" + "\n".join(hits[:40])


def test_the_search_would_find_an_old_name():
    # The check above must be able to fail: the same pattern on a line that
    # carries each old name.
    pattern = re.compile("|".join(_OLD), re.IGNORECASE)
    for sample in ["Trim" + "Link demo", "x.t" + "lk", "y.T" + "LZ", "a Bun" + "dle"]:
        assert pattern.search(sample), sample


def test_version_and_pack_commands(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0
    assert re.fullmatch(r"coefwire \S+\n", capsys.readouterr().out)
    with pytest.raises(SystemExit):
        main(["--help"])
    text = capsys.readouterr().out
    for command in ("pack-dict", "pack", "unpack"):
        assert re.search(rf"^\s+{command}\b", text, re.MULTILINE), command
    assert "bun" + "dle" not in text.lower()
