"""The timing phase: after the quality sweep, alone, threads limited, warm-up then repeats."""
from __future__ import annotations

from typing import Callable

from ..contracts import Plugin
from ..store import Journal
from ..testset import Utterance
from ..timing import thread_limit, time_call
from .plan import Job, Setup, timing_utterances
from .worker import Worker, deadline, item_rng


def timing_plan(setup: Setup) -> list[tuple[Job, Utterance]]:
    """Timing jobs: each configuration on the timing utterances, first seed (key = its item key)."""
    chosen = {u.id for u in timing_utterances(setup)}
    seed = setup.config.seeds[0]
    return [(j, setup.testset.utterances[j.utt]) for j in setup.jobs
            if j.seed == seed and setup.testset.utterances[j.utt].id in chosen]


def run_timing(setup: Setup, jobs: list[tuple[Job, Utterance]], journal: Journal,
               progress: Callable[[str], None]) -> None:
    """Timing phase: alone, threads limited, warm-up then repeats."""
    cfg = setup.config
    worker = Worker(setup, cache_size=1)
    with thread_limit(cfg.timing.threads, setup.plugin.obj):
        for job, u in jobs:
            g = setup.grid[job.point]
            feats = worker.utterance(job.utt)["feats"]
            fn = worker.synth(job.point)
            reset = getattr(setup.plugin.obj, "reset_peak_memory", None)
            if callable(reset):
                reset()
            calls = cfg.timing.warmup + cfg.timing.repeats
            try:
                with deadline(cfg.item_timeout_s and cfg.item_timeout_s * calls):
                    t = time_call(lambda: fn(feats, g.schedule, item_rng(job.seed, u)),
                                  warmup=cfg.timing.warmup, repeats=cfg.timing.repeats,
                                  sync=setup.plugin.synchronize)
            except Exception as e:
                progress(f"timing failed for {g.label} on {u.id}: {type(e).__name__}: {e}")
                continue
            base = {"key": job.key, "schedule": g.spec.name, "sampler": g.sampler, "steps": g.steps,
                    "nfe": g.nfe, "utt_id": u.id, "duration_s": u.duration_s,
                    "peak_mem_bytes": peak_memory(setup.plugin)}
            for rep, secs in [(-1, t.first_s)] + list(enumerate(t.seconds)):
                journal.append({**base, "repeat": rep, "seconds": secs, "rtf": secs / u.duration_s,
                                "ms_per_nfe": 1e3 * secs / max(g.nfe, 1)})
            progress(f"timed {g.label} on {u.id}")


def peak_memory(plugin: Plugin) -> int | None:
    """The plug-in's ``peak_memory_bytes()`` since its last reset, if it reports one."""
    fn = getattr(plugin.obj, "peak_memory_bytes", None)
    try:
        peak = fn() if callable(fn) else None
        return None if peak is None else int(peak)
    except Exception:
        return None
