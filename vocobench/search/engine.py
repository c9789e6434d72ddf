"""Evaluating candidate schedules through the sweep's own jobs, cache keys and journal.

Every candidate becomes a ``kind = "explicit"`` schedule named after its β list; :func:`prepare`
of the sweep builds its jobs, so the cache keys are exactly those a later ``run`` of the same
pasted schedule computes, and every synthesis is journalled in ``items.jsonl`` the moment it
finishes (a killed search resumes without repeating one). Budgets count the distinct syntheses
a search asks for, cached or not (one reused by a later halving rung counts once), so a resumed
search retraces the same path.
"""
from __future__ import annotations

import dataclasses
import math
import time
from pathlib import Path
from typing import Any, Mapping, Sequence

from ..config import RunConfig
from ..schedules import ScheduleSpec
from ..store import Journal
from ..sweep import Progress, prepare, run_jobs
from ..testset import TestSet, Utterance
from .objective import Objective, utterance_means
from .spaces import Candidate


class BudgetSpent(Exception):
    """The synthesis or wall-clock budget of a target ran out."""


class Evaluator:
    """Scores candidates on the first ``n`` utterances of the search split, with a budget."""

    def __init__(self, cfg: RunConfig, out: Path, testset: TestSet, journal: Journal,
                 done: dict[str, dict[str, Any]], *, steps: int, sampler: str, seeds: Sequence[int],
                 search: Sequence[Utterance], objective: Objective, max_syntheses: int | None,
                 max_seconds: float | None, workers: int, scheduler: str | None,
                 progress: bool, identity: Any = None) -> None:
        self.cfg, self.out, self.ts, self.journal, self.done = cfg, out, testset, journal, done
        self.steps, self.sampler, self.seeds, self.search = steps, sampler, list(seeds), list(search)
        self.obj = objective
        self.identity = identity        # the vocoder's fingerprint, computed once
        self.max_syntheses, self.max_seconds = max_syntheses, max_seconds
        self.workers, self.scheduler, self.progress = workers, scheduler, progress
        self.t0 = time.perf_counter()
        self.asked: set[str] = set()     # distinct syntheses asked for (cached or not)
        self.computed = 0           # syntheses actually run in this session
        self.scores: dict[tuple[str, int], float] = {}
        self.history: dict[str, dict[str, Any]] = {}     # name → candidate, n, means, value
        self.trace: list[dict[str, Any]] = []
        self.bar = Progress(max_syntheses or 0, progress, label="search")
        self.cut = False            # the last batch was cut short by the budget
        self.reach: dict[str, int] = {}

    @property
    def spent(self) -> int:
        """Distinct syntheses this target has asked for: its budget use, cached or not."""
        return len(self.asked)

    @property
    def n_search(self) -> int:
        return len(self.search)

    def plan(self, total: int) -> None:
        """Tell the progress line how many syntheses the strategy expects (when no budget is set)."""
        if not self.max_syntheses:
            self.bar.total = max(self.bar.total, self.spent + total)

    # -- running jobs ---------------------------------------------------------------------------
    def records(self, specs: Sequence[ScheduleSpec], steps: int, utts: Sequence[Utterance],
                seeds: Sequence[int], budget: bool = True) -> dict[str, list[dict[str, Any]]]:
        """Item records of each spec on ``utts`` × ``seeds``: from the journal, else synthesised."""
        cfg = dataclasses.replace(self.cfg, schedules=list(specs), steps=[steps], nfe=None,
                                  samplers=[self.sampler], seeds=list(seeds))
        setup = prepare(cfg, self.out, testset=TestSet(self.ts.source, list(utts)),
                        identity=self.identity)
        jobs = sorted(setup.jobs, key=lambda j: (j.point, j.utt, j.seed))   # whole candidates first
        if budget:
            jobs = self._within_budget(jobs)
            seen, self.reach = set(self.asked), {}
            for j in jobs:              # distinct syntheses spent once this candidate is done
                seen.add(j.key)
                self.reach[setup.grid[j.point].spec.name] = len(seen)
        todo = [j for j in jobs if j.key not in self.done]
        bar = self.bar if budget else Progress(len(todo), self.progress, label="reference/held-out")
        if budget:
            for _ in range(sum(j.key in self.done and j.key not in self.asked for j in jobs)):
                bar.step("cached")
        if todo:
            run_jobs(setup, todo, _Tee(self.journal, self.done), bar, self.workers, self.scheduler)
            self.computed += len(todo)
        if budget:
            self.asked.update(j.key for j in jobs)
        out: dict[str, list[dict[str, Any]]] = {s.name: [] for s in specs}
        for j in jobs:
            if j.key in self.done:
                out[setup.grid[j.point].spec.name].append(self.done[j.key])
        self.cut = len(jobs) < len(setup.jobs)
        return out

    def _within_budget(self, jobs: list) -> list:
        if self.max_seconds is not None and time.perf_counter() - self.t0 > self.max_seconds:
            return []
        if self.max_syntheses is None:
            return jobs
        room, out = self.max_syntheses - self.spent, []
        for j in jobs:                      # a synthesis asked for before costs nothing again
            if j.key not in self.asked:
                if room <= 0:
                    break
                room -= 1
            out.append(j)
        return out

    # -- scoring --------------------------------------------------------------------------------
    def score(self, cands: Sequence[Candidate], n: int | None = None) -> list[float]:
        """Objective values of ``cands`` on the first ``n`` search utterances (all: None)."""
        n = self.n_search if n is None else min(n, self.n_search)
        uniq = list({c.name: c for c in cands if (c.name, n) not in self.scores}.values())
        size = len(uniq) if self.max_seconds is None else max(1, self.workers)
        for i in range(0, len(uniq), max(1, size)):       # one batch, unless the clock is watched
            chunk = uniq[i:i + max(1, size)]
            specs = [ScheduleSpec(c.name, "explicit", {"betas": c.betas}) for c in chunk]
            recs = self.records(specs, self.steps, self.search[:n], self.seeds)
            for c in chunk:
                if len(recs[c.name]) == n * len(self.seeds):      # else cut by the budget
                    self._keep(c, n, recs[c.name])
            if self.cut:
                raise BudgetSpent()
        return [self.scores[(c.name, n)] for c in cands]

    def _keep(self, c: Candidate, n: int, recs: list[dict[str, Any]]) -> None:
        means = {col: float(utterance_means(recs, col).mean()) for col in self.obj.columns}
        value = self.obj.value(means)
        self.scores[(c.name, n)] = value
        h = self.history.setdefault(c.name, {"candidate": c, "n": 0})
        if n >= h["n"]:
            h.update(n=n, means=means, value=value)
        self.trace.append({"syntheses": self.reach.get(c.name, self.spent), "seconds": time.perf_counter() - self.t0,
                           "candidate": c.name, "space": c.space, "utterances": n,
                           "value": value if math.isfinite(value) else None})

    def complete(self) -> list[dict[str, Any]]:
        """Candidates scored on the whole search split, best first."""
        full = [h for h in self.history.values() if h["n"] >= self.n_search]
        return sorted(full, key=lambda h: -h["value"])

    def describe(self) -> dict[str, Any]:
        return {"syntheses_asked": self.spent, "syntheses_computed": self.computed,
                "seconds": time.perf_counter() - self.t0, "candidates": len(self.history),
                "max_syntheses": self.max_syntheses, "max_seconds": self.max_seconds}


class _Tee:
    """A journal that also remembers each record in ``done`` (the in-memory cache)."""

    def __init__(self, journal: Journal, done: dict[str, dict[str, Any]]) -> None:
        self.journal, self.done = journal, done

    def append(self, rec: Mapping[str, Any]) -> None:
        self.journal.append(rec)
        self.done[rec["key"]] = dict(rec)
