"""The timing phase: after the quality sweep, alone, threads limited, warm-up then repeats.

It costs what it must: with one worker the sweep's own calls were already uncontended, at the same
thread count, so they are kept as timing samples (``source = "sweep"``) and the process is warm;
repeats then stop as soon as the median's 95 % interval is within ``[timing] rel_width``
(:func:`vocobench.timing.enough`, a fixed-width sequential rule). Every record states its
``source``, ``threads`` and ``batch``."""
from __future__ import annotations

from typing import Any, Callable, Mapping

from ..contracts import Plugin
from ..store import Journal
from ..testset import Utterance
from ..timing import enough, thread_limit, time_call
from .plan import Job, Setup, timing_utterances
from .worker import Worker, deadline, item_rng


def timing_plan(setup: Setup) -> list[tuple[Job, Utterance]]:
    """Timing jobs: each configuration on the timing utterances, first seed (key = its item key)."""
    chosen = {u.id for u in timing_utterances(setup)}
    seed = setup.config.seeds[0]
    return [(j, setup.testset.utterances[j.utt]) for j in setup.jobs
            if j.seed == seed and setup.testset.utterances[j.utt].id in chosen]


def timing_done(records: list[Mapping[str, Any]]) -> dict[str, dict[int, float]]:
    """Repeats already journalled per key (−1: the first call) with their seconds."""
    out: dict[str, dict[int, float]] = {}
    for r in records:
        if r.get("key"):
            out.setdefault(str(r["key"]), {})[int(r["repeat"])] = float(r.get("seconds") or 0.0)
    return out


def missing_repeats(setup: Setup, done: Mapping[str, Mapping[int, float]], key: str) -> tuple[bool, list[int]]:
    """Whether the first call of ``key``'s timing block is still to be kept, and which repeats
    are missing (``done``: repeats already journalled per key, −1 the first call)."""
    have = done.get(key, {})
    timed = [s for r, s in have.items() if r >= 0]
    t = setup.config.timing
    if timed and (len(timed) >= t.repeats or enough(timed, t.rel_width)):
        return False, []                  # complete: every repeat, or stopped by the rule
    return -1 not in have, [r for r in range(t.repeats) if r not in have]


def sweep_samples(setup: Setup, records: list[Mapping[str, Any]]) -> dict[str, list[float]]:
    """Per timing key, the ``synth_s`` of the sweep's successful items with the same utterance and
    configuration (every seed: same cost, other noise), in journal order."""
    by_key = {j.key: j for j in setup.jobs}
    spots: dict[tuple[int, int], list[float]] = {}
    for r in records:
        j = by_key.get(r.get("key"))
        if j is not None and r.get("status") == "ok" and r.get("synth_s"):
            spots.setdefault((j.utt, j.point), []).append(float(r["synth_s"]))
    return {j.key: spots[(j.utt, j.point)] for j, _ in timing_plan(setup) if (j.utt, j.point) in spots}


def run_timing(setup: Setup, jobs: list[tuple[Job, Utterance]], journal: Journal,
               progress: Callable[[str], None], done: Mapping[str, Mapping[int, float]] | None = None,
               prior: Mapping[str, list[float]] | None = None) -> None:
    """Timing phase: alone, threads limited, warm-up then the repeats each block still misses
    (``done``: repeats already journalled per key), stopping early by the sequential rule.
    ``prior``: the sweep's uncontended seconds per key (:func:`sweep_samples`), kept as the first
    repeats, with no warm-up. Every measurement is journalled the moment it is taken, so a kill
    inside a block loses at most the call in flight."""
    cfg = setup.config
    done, prior = done or {}, prior or {}
    worker = Worker(setup, cache_size=1)
    with thread_limit(cfg.timing.threads, setup.plugin.obj):
        for job, u in jobs:
            first, missing = missing_repeats(setup, done, job.key)
            if not first and not missing:
                continue
            have = list(prior.get(job.key, []))[: cfg.timing.repeats]
            g = setup.grid[job.point]
            feats = worker.utterance(job.utt)["feats"]
            fn = worker.synth(job.point)
            reset = getattr(setup.plugin.obj, "reset_peak_memory", None)
            if callable(reset):
                reset()
            base = {"key": job.key, "schedule": g.spec.name, "sampler": g.sampler, "steps": g.steps,
                    "nfe": g.nfe, "utt_id": u.id, "duration_s": u.duration_s}

            def keep(rep: int, secs: float, source: str = "timing") -> None:
                if rep >= 0 or first:
                    journal.append({**base, "peak_mem_bytes": peak_memory(setup.plugin),
                                    "repeat": rep, "seconds": secs, "rtf": secs / u.duration_s,
                                    "ms_per_nfe": 1e3 * secs / max(g.nfe, 1), "source": source,
                                    "threads": cfg.timing.threads, "batch": 1})

            for rep, secs in enumerate(have):
                if rep in missing:
                    keep(rep, secs, "sweep")
            missing = [r for r in missing if r >= len(have)]
            calls = (0 if have else cfg.timing.warmup) + len(missing)
            try:
                with deadline(cfg.item_timeout_s and cfg.item_timeout_s * max(calls, 1)):
                    time_call(lambda: fn(feats, g.schedule, item_rng(job.seed, u)),
                              warmup=cfg.timing.warmup, indices=missing,
                              sync=setup.plugin.synchronize, on_time=keep, first=not have,
                              stop=lambda times: enough(have + times, cfg.timing.rel_width))
            except Exception as e:
                progress(f"timing failed for {g.label} on {u.id}: {type(e).__name__}: {e}")
                continue
            progress(f"timed {g.label} on {u.id}")


def peak_memory(plugin: Plugin) -> int | None:
    """The plug-in's ``peak_memory_bytes()`` since its last reset, if it reports one."""
    fn = getattr(plugin.obj, "peak_memory_bytes", None)
    try:
        peak = fn() if callable(fn) else None
        return None if peak is None else int(peak)
    except Exception:
        return None
