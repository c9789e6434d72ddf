"""Running a sweep: checks, lock, resume, quality sweep (serial, local pool or Dask), timing,
reports, and the verdict on failures."""
from __future__ import annotations

import dataclasses
import json
import sys
import time
from pathlib import Path
from typing import Any, Sequence

from ..config import RunConfig
from ..errors import InputError, RunFailed
from ..keys import ConfigKey
from ..params import is_integer
from ..runtables import failure_reasons, ok_mask
from ..store import (ITEMS, MANIFEST, TIMING, Journal, Run, RunLock, check_item, check_timing,
                     check_writable, dumps, read_jsonl, write_atomic, write_tables)
from ..timing import thread_limit
from .dask_backend import run_dask
from .local import run_local
from .plan import Job, Setup, prepare
from .preflight import estimate, hms, plan_text, reuse_plan
from .progress import Progress, say
from .resources import Choice, choose_batch, choose_workers
from .remote import Record, Sink
from .timing_phase import missing_repeats, run_timing, sweep_samples, timing_done, timing_plan
from .worker import Worker


SWEEP_THREADS = 1      # sweep items run with one BLAS/torch thread (results must not depend on it)


def run(cfg: RunConfig, out_dir: str | Path | None = None, *, progress: bool = True,
        report: bool = True, workers: int | None = None, scheduler: str | None = None,
        fresh: bool = False, retry_failed: bool = False, dry_run: bool = False) -> Path:
    """Run (or resume) a sweep; returns the run directory.

    Checks everything first (config, plug-in, test set, the run directory and its journals),
    says what is reused and what the rest will cost, then holds the directory lock, runs the
    quality sweep (each item journalled the moment it finishes), the timing phase alone (each
    measurement journalled), writes the tables and renders the reports unless they are up to
    date. ``fresh``: compute every item again; ``retry_failed``: compute failed items again
    (otherwise they stay failed); ``dry_run``: print the plan and estimate, write nothing.
    Raises :class:`~vocobench.errors.RunFailed` (after writing everything) when every item
    failed or more than ``[run] max_failed_share`` of them did.
    """
    n_workers = cfg.workers if workers is None else workers
    if n_workers != "auto" and (not is_integer(n_workers) or n_workers < 1):
        raise InputError("must be a positive integer or \"auto\"", field="workers", value=n_workers)
    t0 = time.perf_counter()
    setup = prepare(cfg, out_dir)
    prepare_s = time.perf_counter() - t0
    out = setup.out_dir
    check_writable(out, field="--out" if out_dir is not None else "output.dir", source=cfg.source)
    records = read_jsonl(out / ITEMS, check_item)
    plan = reuse_plan(setup, records, fresh=fresh, retry_failed=retry_failed)
    tdone = {} if fresh else timing_done(read_jsonl(out / TIMING, check_timing))
    mine = {j.key for j in setup.jobs}
    sched = scheduler or cfg.scheduler
    cfg_batch = cfg.batch
    bchoice = choose_batch(setup, cfg_batch)
    setup.config = cfg = dataclasses.replace(cfg, batch=bchoice.value)
    reuse = cfg.timing.reuse_sweep and not sched and cfg.timing.threads == SWEEP_THREADS \
        and cfg.batch == 1
    est = estimate(setup, plan.todo, 1 if n_workers == "auto" else n_workers, tdone,
                   [r for r in records if r["key"] in mine])
    wchoice = None
    if n_workers == "auto":
        wchoice = Choice(1, "the Dask cluster's workers compute") if sched else \
            choose_workers(setup, plan.todo, est.per_eval_s, prepare_s, reuse)
        n_workers = wchoice.value
        if n_workers > 1:
            est = estimate(setup, plan.todo, n_workers, tdone, known=est)
    choices = [f"batch {bchoice.value}: {bchoice.reason}"] \
        if bchoice.value > 1 or cfg_batch not in ("auto", 1) else []
    if wchoice and not sched:
        choices.insert(0, f"workers {n_workers} (auto): {wchoice.reason}")
    if dry_run:
        print(plan_text(setup, plan, est) + "".join("\n" + c for c in choices))
        return out
    for line in [*plan.lines(setup), est.line(), *choices]:
        say(progress, line)
    if est.long:
        print(f"vocobench: warning: this grid is estimated to take {hms(est.seconds or 0)}, over "
              "an hour; Ctrl-C stops it (finished items are kept), --dry-run shows the plan",
              file=sys.stderr)
    with RunLock(out):
        write_atomic(out / MANIFEST, _manifest_text(setup, out))
        journal = Journal(out / ITEMS)
        try:
            status = {**plan.status, **run_jobs(setup, plan.todo, journal, Progress(len(plan.todo), progress),
                                                n_workers, sched)}
        finally:
            journal.close()
        tjobs = [(j, u) for j, u in timing_plan(setup) if status.get(j.key) != "failed"
                 and any(missing_repeats(setup, tdone, j.key))]
        tbar = Progress(len(tjobs), progress, label="timing")
        prior = {}
        if reuse and n_workers == 1:
            fresh_keys = {j.key for j in plan.todo}     # computed just now, alone, in this process
            prior = sweep_samples(setup, [r for r in read_jsonl(out / ITEMS, check_item)
                                          if r.get("key") in fresh_keys])
        tj = Journal(out / TIMING)
        try:
            run_timing(setup, tjobs, tj, lambda s: tbar.step(s) if s.startswith("timed")
                       else say(progress, s), done=tdone, prior=prior)
        finally:
            tj.close()
        stored = write_tables(out)
        verdict = failure_verdict(stored, cfg.max_failed_share)
        if report:
            _report(stored, progress)
    if verdict:
        raise RunFailed(verdict)
    return out


def _manifest_text(setup: Setup, out: Path) -> str:
    """The manifest; an unchanged one keeps its creation time (so its report stays current)."""
    m = json.loads(dumps(setup.manifest()))
    try:
        old = json.loads((out / MANIFEST).read_text(encoding="utf-8"))
        if isinstance(old, dict) and {**old, "created_utc": m["created_utc"]} == m:
            m["created_utc"] = old["created_utc"]
    except (OSError, ValueError):
        pass
    return dumps(m) + "\n"


def failure_verdict(run: Run, max_share: float) -> str | None:
    """Why the run is not to be trusted, or None: every item failed, or more than ``max_share``
    of them; names the most common reason with its first message."""
    items = run.items
    if not len(items):
        return None
    n, bad = len(items), int((~ok_mask(items)).sum())
    if bad == n:
        why = f"every item failed ({n} of {n})"
    elif bad / n > max_share:
        why = (f"{bad} of {n} items failed ({100 * bad / n:.0f} %, more than "
               f"run.max_failed_share = {max_share:g})")
    else:
        return None
    top = failure_reasons(items).iloc[0]
    return (f"{why}; most common reason: {top['reason']} ({top['count']} items), first message: "
            f"{top['first']} (all reasons: {Path(run.path) / 'items.csv'}, column failure)")


def _report(stored: Run, progress: bool) -> None:
    if not len(stored.items):
        say(progress, "no report: the run has no items")
        return
    try:
        from ..report.basis import basis_lines
        from ..report.publish import report_is_current
    except ImportError:          # decision stage not installed in this build
        return
    if report_is_current(stored):
        for line in basis_lines(stored):
            say(progress, line)
        say(progress, "reports are up to date: they were built from exactly these items and "
                      f"options (re-render with: vocobench report {stored.path})")
    else:
        render(stored, echo=progress)


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
    with thread_limit(SWEEP_THREADS, setup.plugin.obj):
        for rec in worker.run(jobs):
            finished(rec)
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
