"""Progress of long commands on standard error.

A command that runs more than about two seconds says how far it is: a bar
redrawn in place on a terminal, one plain line every few seconds otherwise (a
log file or a pipe gets no control characters).  Nothing is shown for runs
shorter than the delay, and nothing at all once :func:`set_quiet` was called
(``coefwire --quiet``).  Standard output is never touched.
"""

from __future__ import annotations

import contextlib
import sys
import threading
import time

__all__ = ["Progress", "busy", "set_quiet", "is_quiet"]

_QUIET = False


def set_quiet(quiet: bool = True) -> None:
    """Silence (or restore) every progress report of this process."""
    global _QUIET
    _QUIET = bool(quiet)


def is_quiet() -> bool:
    """Whether progress reports are silenced."""
    return _QUIET


class Progress:
    """Count ``total`` steps of ``what``; report on standard error after ``delay_s``.

    Parameters
    ----------
    total : int
        Steps expected (0 or less: unknown, no percentage).
    what : str
        What is being done ("comparing bases").
    unit : str
        Name of one step ("run", "trial", "scenario").
    delay_s, every_s : float
        Silence before the first report; seconds between plain-text lines.
    stream : file, optional
        Where to report (default: standard error at each report).

    Examples
    --------
    Not a terminal, so one plain line per report (no delay and no interval here):

    >>> import io
    >>> set_quiet(False)  # what the command line's --quiet switches on
    >>> out = io.StringIO()
    >>> with Progress(2, "testing", "case", delay_s=0.0, every_s=0.0, stream=out) as bar:
    ...     bar.update()
    ...     bar.update()
    >>> print(out.getvalue().replace(" 0 s", " T s"), end="")
    testing:  50 % 1/2 cases, T s
    testing: 100 % 2/2 cases, T s
    """

    def __init__(self, total: int, what: str, unit: str = "step", delay_s: float = 2.0,
                 every_s: float = 5.0, stream=None):
        self.total, self.what, self.unit = int(total), what, unit
        self.delay_s, self.every_s = delay_s, every_s
        self.done = 0
        self._stream = stream
        self._t0 = time.monotonic()
        self._last = None  # time of the last report
        self._drawn = 0  # width of the bar on screen, to clear it

    @property
    def stream(self):
        return self._stream if self._stream is not None else sys.stderr

    def _tty(self) -> bool:
        isatty = getattr(self.stream, "isatty", None)
        return bool(isatty and isatty())

    def update(self, steps: int = 1, note: str = "") -> None:
        """``steps`` more done; report when due (``note``: what is being done now)."""
        self.done += steps
        if _QUIET:
            return
        now = time.monotonic()
        elapsed = now - self._t0
        if elapsed < self.delay_s:
            return
        tty = self._tty()
        if self._last is not None and now - self._last < (0.2 if tty else self.every_s):
            return
        self._last = now
        count = f"{self.done}/{self.total} {self.unit}s" if self.total > 0 else \
            f"{self.done} {self.unit}s"
        pct = f" {100 * self.done / self.total:3.0f} %" if self.total > 0 else ""
        tail = f" {elapsed:.0f} s" + (f"  {note}" if note else "")
        if tty:
            width = 24
            fill = int(width * self.done / self.total) if self.total > 0 else 0
            bar = f"[{'#' * fill}{'-' * (width - fill)}]"
            line = f"{self.what} {bar}{pct} {count}{tail}"
            self.stream.write("\r" + line.ljust(self._drawn))
            self._drawn = len(line)
        else:
            self.stream.write(f"{self.what}:{pct} {count},{tail}\n")
        self.stream.flush()

    def close(self) -> None:
        """Finish: clear the bar from a terminal (plain lines stay)."""
        if self._drawn:
            self.stream.write("\r" + " " * self._drawn + "\r")
            self.stream.flush()
            self._drawn = 0

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


@contextlib.contextmanager
def busy(what: str, delay_s: float = 2.0, every_s: float = 5.0, stream=None):
    """Report that ``what`` is still running, for work that cannot count its steps.

    A background thread reports the elapsed time after ``delay_s`` (a bar-less
    line redrawn on a terminal, a plain line every ``every_s`` seconds
    otherwise) until the block ends; silent with :func:`set_quiet`.
    """
    if _QUIET:
        yield
        return
    stop = threading.Event()
    p = Progress(0, what, "step", delay_s=delay_s, every_s=every_s, stream=stream)

    def tick() -> None:
        t0 = time.monotonic()
        if stop.wait(delay_s):
            return
        while True:
            elapsed = time.monotonic() - t0
            line = f"{what}: still running, {elapsed:.0f} s"
            if p._tty():
                p.stream.write("\r" + line.ljust(p._drawn))
                p._drawn = len(line)
            else:
                p.stream.write(line + "\n")
            p.stream.flush()
            if stop.wait(1.0 if p._tty() else every_s):
                return

    thread = threading.Thread(target=tick, daemon=True)
    thread.start()
    try:
        yield
    finally:
        stop.set()
        thread.join()
        p.close()
