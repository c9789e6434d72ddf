"""Running a sweep: lock, resume, quality sweep (serial, local pool or Dask), timing, reports."""
from __future__ import annotations

from pathlib import Path
from typing import Any, Sequence

from ..config import RunConfig
from ..errors import InputError
from ..keys import ConfigKey
from ..params import is_integer
from ..store import ITEMS, MANIFEST, TIMING, Journal, RunLock, dumps, read_jsonl, write_atomic, write_tables
from ..timing import thread_limit
from .dask_backend import run_dask
from .local import run_local
from .plan import Job, Setup, prepare
from .progress import Progress, say
from .remote import Record, Sink
from .timing_phase import run_timing, timing_plan
from .worker import Worker


def run(cfg: RunConfig, out_dir: str | Path | None = None, *, progress: bool = True,
        report: bool = True, workers: int | None = None, scheduler: str | None = None) -> Path:
    """Run (or resume) a sweep; returns the run directory.

    Holds the directory lock, skips jobs already in the journal, runs the quality sweep (each
    item journalled the moment it finishes), then the timing phase alone, then the reports.
    """
    n_workers = cfg.workers if workers is None else workers
    if not is_integer(n_workers) or n_workers < 1:
        raise InputError("must be a positive integer", field="workers", value=n_workers)
    setup = prepare(cfg, out_dir)
    out = setup.out_dir
    with RunLock(out):
        write_atomic(out / MANIFEST, dumps(setup.manifest()) + "\n")
        journal = Journal(out / ITEMS)
        status = {r.get("key"): r.get("status") for r in read_jsonl(out / ITEMS)}
        todo = [j for j in setup.jobs if j.key not in status]
        say(progress, f"{len(setup.jobs)} items ({len(setup.jobs) - len(todo)} already done), "
                      f"{len(setup.grid)} configurations, {len(setup.testset.utterances)} utterances")
        bar = Progress(len(todo), progress)
        status.update(run_jobs(setup, todo, journal, bar, n_workers, scheduler or cfg.scheduler))
        journal.close()
        tj = Journal(out / TIMING)
        tdone = {r.get("key") for r in read_jsonl(out / TIMING)}
        failed = {k for k, v in status.items() if v == "failed"}
        tjobs = [(j, u) for j, u in timing_plan(setup) if j.key not in tdone | failed]
        tbar = Progress(len(tjobs), progress, label="timing")
        run_timing(setup, tjobs, tj, lambda s: tbar.step(s) if s.startswith("timed") else say(progress, s))
        tj.close()
        changed = bool(todo or tjobs) or not (out / "summary.md").exists()
        stored = write_tables(out)
        if report and changed:
            render(stored, echo=progress)
        elif report:
            say(progress, "nothing new to compute; reports are up to date "
                          f"(re-render with: vocobench report {out})")
    return out


def run_jobs(setup: Setup, jobs: list[Job], journal: Journal, bar: Progress, workers: int,
             scheduler: str | None) -> dict[str, str]:
    """Quality sweep: serial in this process, or in ``workers`` local processes, or on the Dask
    cluster at ``scheduler`` (:func:`run_parallel`); each record is journalled on arrival.

    Every item is computed with one BLAS/OpenMP thread, serial or parallel: multi-threaded BLAS
    changes the last bits of results, and audio hashes and scores must not depend on the worker
    or core count. The timing phase uses ``[timing] threads``. Returns each new item's status.
    """
    status: dict[str, str] = {}

    def finished(rec: Record) -> None:
        journal.append(rec)
        status[rec["key"]] = rec["status"]
        bar.step(f"{rec['utt_id']} {ConfigKey.of(rec).label}")

    if scheduler or workers != 1:
        run_parallel(setup, jobs, finished, workers=workers, scheduler=scheduler)
        return status
    worker = Worker(setup)
    with thread_limit(1, setup.plugin.obj):
        for job in jobs:
            finished(worker.process(job))
    return status


def run_parallel(setup: Setup, jobs: Sequence[Job], sink: Sink, *, workers: int | None,
                 scheduler: str | None) -> None:
    """Run ``jobs`` on a Dask cluster (``scheduler`` given) or in ``workers`` local processes
    (a positive integer: :func:`run` checks it; ``None`` means 1).

    ``sink(record)`` is called in this process for every finished item, in completion order.
    """
    if scheduler:
        run_dask(setup, jobs, sink, scheduler)
        return
    run_local(setup, jobs, sink, 1 if workers is None else workers)


def render(out: Any, echo: bool = True) -> Any:
    """Reports for a run directory or an already loaded :class:`~vocobench.store.Run`."""
    try:
        from ..report import render_report
    except ImportError:          # decision stage not installed in this build
        return None
    return render_report(out, echo=echo)
