"""Running a survey: one task per file on Dask (or in this process), results kept as they finish.

Every finished file is written at once as its own Parquet file under
``DIR/rows/`` (together a Parquet dataset), named by a key of the settings
and the file (path, size, modification time).  An interrupted survey keeps
those; ``--resume`` skips every file whose result is already there.  The
tasks return only their rows; the client writes them, so workers need to
read the archive but never write to ``DIR``.

Engine: Dask's distributed scheduler.  Without an address a local cluster of
worker processes (one thread each, one per core unless told) is started and
closed again; with ``tcp://HOST:PORT`` the tasks go to that running cluster,
whose workers must see the archive under the same paths.  One worker and no
address runs the tasks in this process, one after the other (same rows).
"""

from __future__ import annotations

import json
import os
import sys
import threading
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass
from pathlib import Path

from codec import InputError, atomic_output

from ._survey import ROW_KEYS, ArchiveFile, SurveySettings, survey_file

__all__ = ["RunStats", "prepare_out", "part_path", "run_survey", "read_parts", "row_schema"]

#: Seconds between progress lines when standard error is not a terminal.
PROGRESS_EVERY_S = 10.0

_INT = ("samples", "frames_below_target", "frames_at_floor")
_STR = ("file", "group", "period", "channel", "basis", "error")
_BOOL = ("winner",)


def row_schema():
    """The Parquet schema of the rows (fixed, so error rows and full rows share it)."""
    import pyarrow as pa

    def kind(k):
        if k in _INT:
            return pa.int64()
        if k in _STR:
            return pa.string()
        if k in _BOOL:
            return pa.bool_()
        return pa.float64()

    return pa.schema([(k, kind(k)) for k in ROW_KEYS])


@dataclass(frozen=True)
class RunStats:
    """What a run did: files in the archive, computed now, kept from before, failed."""

    files: int
    computed: int
    skipped: int
    failed: int
    dashboard: str | None = None


def part_path(out: Path, item: ArchiveFile, fingerprint: str) -> Path:
    """Where the result of ``item`` lives in the survey folder."""
    return out / "rows" / f"part-{item.key(fingerprint)}.parquet"


def prepare_out(out: Path, settings: SurveySettings, resume: bool, write: bool = True) -> None:
    """Create the survey folder, or check that a resumed one used the same settings.

    ``write=False`` only checks (nothing is created).
    """
    meta = out / "survey.json"
    if out.exists() and not out.is_dir():
        raise InputError("--out names a file, not a folder; name a folder", str(out))
    if meta.exists():
        if not resume:
            raise InputError("this folder already holds a survey; give --resume to finish it "
                             "or name another --out folder", str(out))
        try:
            old = json.loads(meta.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            raise InputError("the survey's settings file cannot be read; start the survey "
                             "again in a new --out folder", str(meta)) from None
        if old.get("fingerprint") != settings.fingerprint():
            raise InputError("this folder's survey used other settings (profile, bases, "
                             "fidelities or --group-by); resume with the same ones or name "
                             "another --out folder", str(out))
        return
    if out.is_dir() and (out / "rows").is_dir() and any((out / "rows").iterdir()):
        raise InputError("this folder already holds survey results without settings; name "
                         "another --out folder", str(out))
    if not out.parent.is_dir():
        raise InputError("the folder that should hold --out does not exist; create it first",
                         str(out))
    if not write:
        return
    (out / "rows").mkdir(parents=True, exist_ok=True)
    with atomic_output(meta) as tmp:
        tmp.write_text(json.dumps({"fingerprint": settings.fingerprint(),
                                   "settings": asdict(settings)}, indent=2) + "\n",
                       encoding="utf-8")


def _write_part(path: Path, rows: list[dict]) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.Table.from_pylist(rows, schema=row_schema())
    with atomic_output(path) as tmp:
        pq.write_table(table, tmp)


def read_parts(out: Path, items: list[ArchiveFile], fingerprint: str) -> list[dict]:
    """The rows of ``items`` in archive order (files without a result are left out)."""
    import pyarrow.parquet as pq

    rows: list[dict] = []
    for item in items:
        path = part_path(out, item, fingerprint)
        if path.is_file():
            rows += pq.read_table(path, schema=row_schema()).to_pylist()
    return rows


class _Reporter:
    """Progress lines on standard error every few seconds (not a terminal)."""

    def __init__(self, total: int, quiet: bool, stream=None):
        self.total, self.quiet = total, quiet
        self.stream = stream or sys.stderr
        self.done = self.failed = 0
        self.t0 = self.last = time.monotonic()

    def step(self, failed: bool) -> None:
        self.done += 1
        self.failed += failed
        now = time.monotonic()
        if not self.quiet and (now - self.last >= PROGRESS_EVERY_S or self.done == self.total):
            self.last = now
            print(f"survey: {self.done}/{self.total} files done, {self.failed} failed, "
                  f"{now - self.t0:.0f} s", file=self.stream, flush=True)


def run_survey(items: list[ArchiveFile], out: Path, settings: SurveySettings, *,
               scheduler: str | None = None, workers: int | None = None,
               resume: bool = False, quiet: bool = False,
               say: Callable[[str], None] | None = None) -> RunStats:
    """Survey ``items`` into ``out``; return what was done.

    Parameters
    ----------
    items : list of ArchiveFile
        The archive, from :func:`link_sim._survey.expand_archive`.
    out : Path
        The survey folder (created; must be new unless ``resume``).
    settings : SurveySettings
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://HOST:PORT``).
    workers : int, optional
        Worker processes of the local cluster (default: one per core); 1 with
        no scheduler runs in this process.
    resume : bool
        Skip every file whose result is already in ``out``.
    quiet : bool
        No progress output.
    say : callable
        Where messages go (default: standard error).

    Returns
    -------
    RunStats
        Files in the archive, computed now, kept from before, failed.

    Examples
    --------
    Two files in this process (``workers=1``); a resumed run recomputes nothing:

    >>> import numpy as np, pathlib, tempfile, codec
    >>> from link_sim import expand_archive, resolve_survey_bases
    >>> p = codec.Profile(frame_length=32,
    ...                   channels=(codec.ChannelSpec(name="v", sample_rate_hz=10.0),))
    >>> settings = SurveySettings(p.model_dump(), resolve_survey_bases("dct", 32), (0.99,))
    >>> with tempfile.TemporaryDirectory() as d:
    ...     for name in ("north_2026-01-01.csv", "south_2026-01-01.csv"):
    ...         x = np.cumsum(np.random.default_rng(0).standard_normal(256))
    ...         t = np.arange(256) / 10.0
    ...         np.savetxt(pathlib.Path(d) / name, np.column_stack([t, x]), delimiter=",",
    ...                    header="time,v", comments="")
    ...     items = expand_archive([str(pathlib.Path(d) / "*.csv")], "{station}_{date}.csv")
    ...     out = pathlib.Path(d) / "survey"
    ...     first = run_survey(items, out, settings, workers=1, quiet=True)
    ...     again = run_survey(items, out, settings, resume=True, quiet=True)
    >>> first.files, first.computed, first.failed, again.computed, again.skipped
    (2, 2, 0, 0, 2)
    """
    say = say or (lambda text: print(text, file=sys.stderr, flush=True))
    fp = settings.fingerprint()
    prepare_out(out, settings, resume, write=False)
    todo = [i for i in items if not part_path(out, i, fp).is_file()]
    skipped = len(items) - len(todo)
    if skipped and not quiet:
        say(f"survey: {skipped} of {len(items)} files already done in {out}, skipped")
    if not todo:
        return RunStats(len(items), 0, skipped, 0)
    if scheduler is None and workers == 1:
        prepare_out(out, settings, resume)
        failed = _run_serial(todo, out, settings, fp, quiet)
        return RunStats(len(items), len(todo), skipped, failed)
    return _run_dask(todo, out, settings, fp, len(items), skipped, scheduler, workers, quiet,
                     say, lambda: prepare_out(out, settings, resume))


def _run_serial(todo, out, settings, fp, quiet) -> int:
    bar = _Reporter(len(todo), quiet)
    for item in todo:
        rows = survey_file(item, settings)
        _write_part(part_path(out, item, fp), rows)
        bar.step(rows[0]["error"] is not None)
    return bar.failed


def _run_dask(todo, out, settings, fp, total, skipped, scheduler, workers, quiet,
              say, start) -> RunStats:
    import logging

    from distributed import Client, LocalCluster, as_completed

    cluster = None
    if scheduler is None:
        n = workers or os.cpu_count() or 1
        # Processes, one thread each: the codec is NumPy on small arrays and holds the GIL
        # most of the time, so threads would not run files in parallel.  Port 0 everywhere:
        # several people may run surveys on one machine.
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                               scheduler_port=0, dashboard_address=":0",
                               silence_logs=logging.ERROR)
        client = Client(cluster)
    else:
        try:
            client = Client(scheduler, timeout="20s")
        except OSError as exc:
            raise InputError(f"no Dask scheduler answers there ({exc.__class__.__name__}); "
                             "check the address and that the scheduler runs",
                             scheduler) from None
    try:
        start()  # the survey folder is made only once the cluster answers
        dashboard = _dashboard(client)
        if dashboard and not quiet:
            say(f"survey: Dask dashboard at {dashboard}")
        futures = {client.submit(survey_file, item, settings, pure=False,
                                 key=f"survey-file-{item.key(fp)}"): item for item in todo}
        bar_thread = None
        reporter = _Reporter(len(todo), quiet or sys.stdout.isatty())
        if not quiet and sys.stdout.isatty():  # Dask draws its bar on standard output
            bar_thread = _dask_bar(list(futures))
        for fut in as_completed(futures):
            item = futures.pop(fut)
            rows = fut.result()  # a bug in a task is raised here, loudly
            _write_part(part_path(out, item, fp), rows)
            fut.release()  # the rows are on disk; nothing of the file stays in the cluster
            reporter.step(rows[0]["error"] is not None)
        if bar_thread is not None:
            bar_thread.join(timeout=5)
        return RunStats(total, len(todo), skipped, reporter.failed, dashboard)
    finally:
        for fut in futures:
            fut.cancel()
        client.close()
        if cluster is not None:
            cluster.close()


def _dashboard(client) -> str | None:
    """The dashboard's address when the scheduler serves one (it needs bokeh)."""
    try:
        services = client.scheduler_info().get("services", {})
    except Exception:  # an old or odd scheduler: no dashboard address then
        return None
    return client.dashboard_link if "dashboard" in services else None


def _dask_bar(futures) -> threading.Thread:
    """Dask's own text progress bar, drawn from a helper thread while the results are written."""
    from distributed import progress

    thread = threading.Thread(target=progress, args=(futures,), kwargs={"multi": False},
                              daemon=True, name="survey-progress")
    thread.start()
    return thread
