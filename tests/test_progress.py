"""Progress on standard error: plain lines off a terminal, a bar on one, silence with --quiet.

Common practice, no source: a redrawn line ends in a carriage return, a log gets
whole lines and no control characters.
"""

import io

from codec._progress import Progress, is_quiet, set_quiet
from codec.cli import main


class _Tty(io.StringIO):
    def isatty(self):
        return True


def test_plain_lines_off_a_terminal():
    out = io.StringIO()
    with Progress(4, "testing", "run", delay_s=0.0, every_s=0.0, stream=out) as p:
        for _ in range(4):
            p.update()
    lines = out.getvalue().splitlines()
    assert lines[0].startswith("testing:  25 % 1/4 runs,")
    assert lines[-1].startswith("testing: 100 % 4/4 runs,")
    assert "\r" not in out.getvalue()


def test_bar_on_a_terminal_is_cleared_at_the_end():
    out = _Tty()
    with Progress(2, "testing", "run", delay_s=0.0, stream=out) as p:
        p.update()
    text = out.getvalue()
    assert text.startswith("\rtesting [") and "1/2 runs" in text
    assert text.endswith("\r") and "\n" not in text


def test_nothing_before_the_delay_and_nothing_when_quiet():
    out = io.StringIO()
    p = Progress(3, "testing", delay_s=3600.0, stream=out)
    p.update()
    assert out.getvalue() == ""
    set_quiet(True)
    try:
        q = Progress(3, "testing", delay_s=0.0, every_s=0.0, stream=out)
        q.update()
        assert out.getvalue() == ""
    finally:
        set_quiet(False)


def test_quiet_is_accepted_after_the_command(tmp_path):
    try:
        assert main(["demo", "--out", str(tmp_path), "--no-compare", "--scenario",
                     "orbiter_hk", "--quiet"]) == 0
        assert is_quiet()
    finally:
        set_quiet(False)


def test_busy_reports_elapsed_time_until_the_work_ends():
    import time

    from codec._progress import busy

    out = io.StringIO()
    with busy("crunching", delay_s=0.0, every_s=0.01, stream=out):
        deadline = time.monotonic() + 10.0
        while not out.getvalue() and time.monotonic() < deadline:
            time.sleep(0.01)  # wait for the reporter's first line (not a timing check)
    first = out.getvalue().splitlines()[0]
    assert first.startswith("crunching: still running, ") and first.endswith(" s")
    set_quiet(True)
    try:
        quiet = io.StringIO()
        with busy("crunching", delay_s=0.0, every_s=0.01, stream=quiet):
            time.sleep(0.05)
        assert quiet.getvalue() == ""
    finally:
        set_quiet(False)
