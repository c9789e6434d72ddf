"""Before a sweep starts: what the run directory already holds, what is left, what it will cost.

:func:`reuse_plan` splits the jobs into items reused from the journal and items to compute
(``--fresh``: all; ``--retry-failed``: failed ones too; otherwise failed items stay failed);
:func:`estimate` measures the vocoder on the contract check's probe and extrapolates to the
items left; :func:`plan_text` is what ``--dry-run`` prints. Nothing here writes.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from ..check import PROBE_SECONDS, probe_signal
from ..frontend import MelFrontEnd
from ..schedules import cosine, subsequence
from ..timing import thread_limit
from .plan import Job, Setup
from .timing_phase import missing_repeats, timing_plan

LONG_RUN_S = 3600.0          # a grid estimated to take longer is announced before it starts
# Steps of the estimate's probe calls: the fewest every built-in sampler runs (the cost is per
# evaluation; each probe call of a network-sized model is paid before the sweep starts).
ESTIMATE_STEPS = 2


@dataclass
class ReusePlan:
    """Jobs to compute and what is kept from earlier runs in the folder."""

    todo: list[Job]
    reused: int = 0                  # ok items kept
    failed_kept: int = 0             # failed items kept as failed (not retried)
    retried: int = 0                 # failed items computed again (--retry-failed)
    fresh: bool = False
    other: int = 0                   # journalled items of another grid or vocoder (ignored)
    status: dict[str, str] = field(default_factory=dict)     # key → status, this grid's items

    def lines(self, setup: Setup) -> list[str]:
        """What the terminal says before the sweep starts."""
        ident, n = setup.identity, len(setup.jobs)
        out = [f"{n} items ({len(setup.grid)} configurations × {len(setup.testset.utterances)} "
               f"utterances × {len(setup.config.seeds)} seeds): {self.reused} reused, "
               f"{len(self.todo)} to compute; vocoder fingerprint {ident.fingerprint} "
               f"({ident.basis})"]
        if self.fresh:
            out.append("--fresh: every item is computed again")
        if self.failed_kept:
            out.append(f"{self.failed_kept} items failed in an earlier run and stay failed (not "
                       "retried); --retry-failed computes them again")
        if self.retried:
            out.append(f"retrying {self.retried} items that failed in an earlier run")
        if self.other:
            out.append(f"{self.other} items in this folder come from another grid, vocoder code "
                       "or version: kept in the journal, left out of this run's tables")
        return out


def reuse_plan(setup: Setup, records: list[Mapping[str, Any]], *, fresh: bool = False,
               retry_failed: bool = False) -> ReusePlan:
    """Split ``setup.jobs`` by the journal ``records`` (the last record of a key wins)."""
    wanted = {j.key for j in setup.jobs}
    status: dict[str, str] = {}
    for r in records:
        status[str(r["key"])] = str(r["status"])
    other = sum(k not in wanted for k in status)
    mine = {k: v for k, v in status.items() if k in wanted}
    if fresh:
        return ReusePlan(list(setup.jobs), fresh=True, other=other, status={})
    failed = {k for k, v in mine.items() if v == "failed"}
    todo = [j for j in setup.jobs if j.key not in mine or (retry_failed and j.key in failed)]
    return ReusePlan(todo, reused=len(mine) - len(failed),
                     failed_kept=0 if retry_failed else len(failed),
                     retried=len(failed) if retry_failed else 0, other=other, status=mine)


@dataclass
class Estimate:
    """Estimated wall time of the work left (synthesis only: scoring is not included)."""

    seconds: float | None
    evaluations: float = 0.0             # network evaluations × seconds of audio, items left
    per_eval_s: float | None = None      # measured seconds per evaluation per second of audio
    note: str = ""
    source: str = ""                     # where per_eval_s was measured

    def line(self) -> str:
        if self.seconds is None:
            return f"estimated cost: unknown ({self.note})"
        if self.per_eval_s is None:
            return "estimated cost: nothing to compute"
        return (f"estimated cost: {hms(self.seconds)} of synthesis ({self.evaluations:.4g} "
                f"evaluation-seconds of audio at {1e3 * self.per_eval_s:.3g} ms each, measured "
                f"on {self.note}; scoring not included)")

    @property
    def long(self) -> bool:
        return self.seconds is not None and self.seconds > LONG_RUN_S


_PROBE_FEATURES: dict[tuple[type, str], np.ndarray] = {}   # (type, fingerprint) -> features


def probe_features(frontend: MelFrontEnd) -> np.ndarray:
    """``frontend``'s features of the contract check's probe signal, computed with one thread
    once per front-end and process (every fresh run probes); a copy, so callers may write it."""
    key = (type(frontend), frontend.fingerprint())
    if key not in _PROBE_FEATURES:
        if len(_PROBE_FEATURES) >= 16:
            _PROBE_FEATURES.clear()
        with thread_limit(1):            # a BLAS call outside a limit wakes (and spins) its threads
            _PROBE_FEATURES[key] = frontend(probe_signal(frontend.sample_rate))
    return _PROBE_FEATURES[key].copy()


def probe_schedule(plugin: Any) -> Any:
    """The ``ESTIMATE_STEPS``-step schedule the probe calls run: a subsequence of the training
    schedule, or a cosine schedule for a plug-in without one."""
    ts = plugin.training_schedule
    return subsequence(ts, ESTIMATE_STEPS) if ts is not None and len(ts) >= ESTIMATE_STEPS \
        else cosine(ESTIMATE_STEPS)


def probe_seconds_per_eval(setup: Setup) -> float:
    """Seconds per network evaluation per second of audio: the vocoder on the contract check's
    probe at ``ESTIMATE_STEPS`` steps, first sampler of the grid, one thread, second call timed."""
    p = setup.plugin
    sched = probe_schedule(p)
    g = setup.grid[0]
    fn = p.synthesizer(g.sampler, setup.config.sampler_options.get(g.sampler))
    feats = probe_features(p.frontend)
    with thread_limit(1, p.obj):
        fn(feats, sched, np.random.default_rng(0))          # lazy initialisation, compilation
        p.synchronize()
        t0 = time.perf_counter()
        fn(feats, sched, np.random.default_rng(0))
        p.synchronize()
        dt = time.perf_counter() - t0
    return dt / (max(p.nfe(sched, g.sampler), 1) * PROBE_SECONDS)


def journal_seconds_per_eval(records: list[Mapping[str, Any]]) -> float | None:
    """Median seconds per network evaluation per second of audio of the journal's ok items
    (None without any); a resumed run is estimated from its own items, with no probe call."""
    rates = [r["synth_s"] / (r["nfe"] * r["duration_s"]) for r in records
             if r.get("status") == "ok" and r.get("synth_s") and r.get("nfe") and r.get("duration_s")]
    return float(np.median(rates)) if rates else None


def estimate(setup: Setup, todo: list[Job], workers: int, timing_done: Mapping[str, Mapping[int, float]],
             records: list[Mapping[str, Any]] = (), known: Estimate | None = None) -> Estimate:
    """Cost of ``todo`` (over ``workers``) and of the timing blocks still missing repeats:
    steps × seconds of audio × the time per step, measured on the journal's finished items
    (``records``) or else on the contract check's probe; ``known``: an estimate of this run
    whose measured rate is reused (no probe call again)."""
    utts, grid, tm = setup.testset.utterances, setup.grid, setup.config.timing
    sweep = sum(grid[j.point].nfe * utts[j.utt].duration_s for j in todo)
    timed = 0.0
    for job, u in timing_plan(setup):
        first, missing = missing_repeats(setup, timing_done, job.key)
        if first or missing:
            timed += (tm.warmup + len(missing)) * grid[job.point].nfe * u.duration_s
    if not sweep and not timed:
        return Estimate(0.0)
    if known is not None and known.per_eval_s is not None:
        rate, where = known.per_eval_s, known.source
    else:
        rate, where = journal_seconds_per_eval(records), "finished items of this run"
    if rate is None:
        where = f"the {PROBE_SECONDS:g} s contract-check probe"
        try:
            rate = probe_seconds_per_eval(setup)
        except Exception as e:              # the sweep isolates such failures item by item
            return Estimate(None, note=f"the probe call raised {type(e).__name__}: {e}")
    note = where + (f", sweep over {workers} workers" if workers > 1 else "")
    return Estimate(rate * (sweep / max(workers, 1) + timed), sweep + timed, rate, note, where)


def plan_text(setup: Setup, plan: ReusePlan, est: Estimate) -> str:
    """The plan ``--dry-run`` prints: configurations, items, reuse and the estimate."""
    todo: dict[int, int] = {}
    for j in plan.todo:
        todo[j.point] = todo.get(j.point, 0) + 1
    per = len(setup.testset.utterances) * len(setup.config.seeds)
    width = max(len(g.label) for g in setup.grid)
    lines = [f"plan for {setup.out_dir} (dry run: nothing is computed or written)", *plan.lines(setup),
             "configurations:"]
    lines += [f"  {g.label:<{width}}  nfe {g.nfe:>5}  items {per:>5}  to compute {todo.get(i, 0):>5}"
              for i, g in enumerate(setup.grid)]
    lines.append(est.line())
    return "\n".join(lines)


def hms(seconds: float) -> str:
    """``1 h 02 min``, ``3 min 05 s`` or ``4.2 s``."""
    s = float(seconds)
    if s >= 3600:
        return f"{int(s // 3600)} h {int(s % 3600 // 60):02d} min"
    if s >= 60:
        return f"{int(s // 60)} min {int(s % 60):02d} s"
    return f"{s:.2g} s"
