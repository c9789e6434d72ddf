"""How a sweep uses the machine: processes (``[run] workers``) and batch size (``[run] batch``).

Every item is computed with one thread, so results are bit-identical whatever is chosen here:
multi-threaded kernels change the last bits (measured on the DiffWave-sized example of
``scenarios/diffwave-cpu``: max |Δ| 8.9e-8 between one and two torch intra-op threads with
oneDNN convolutions). The cores are used by processes instead; ``[timing] threads`` sets the
thread count latency is measured at.

``workers = "auto"``: one process per usable core, fewer when memory is short, one when the model
runs on an accelerator (the processes would share it); and one when the estimate says that is
faster: with one process the sweep's own calls are the timing samples, so the timing phase costs
nearly nothing, while extra processes pay their start-up and leave the whole timing phase to run
alone afterwards. The choice uses the pre-flight estimate (:mod:`.preflight`) and a scoring probe.

``batch = "auto"``: the seeds of an utterance and configuration go through the vocoder in one
call on an accelerator, when the plug-in can batch and its output for an item does not depend on
the rest of the batch (checked on the contract probe); one at a time on a CPU, where batching
long waveforms measured slower per item (DiffWave-sized, 1.5 s items: batch 2 1.14×, batch 4
1.27× the time per item of batch 1 — the activations of a batch outgrow the caches).
"""
from __future__ import annotations

import os
import time
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from ..check import PROBE_SECONDS, probe_signal
from ..contracts import Plugin
from ..timing import MIN_SAMPLES, thread_limit
from .plan import Job, Setup
from .preflight import hms, probe_features, probe_schedule
from .timing_phase import timing_plan

# Seconds a spawned helper needs before its first item besides what the main process spent
# preparing the run (interpreter, package imports): measured 0.6–1.0 s on the 2-core development
# machine (bench/bench_harness.py, time to the first item); the larger figure is used.
HELPER_START_S = 1.0
AUTO_MAX_BATCH = 16          # most items per call under batch = "auto"


@dataclass(frozen=True)
class Choice:
    """A resolved setting and why, in words for the terminal."""

    value: int
    reason: str


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity where the platform tells)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


def available_memory() -> int | None:
    """``MemAvailable`` of ``/proc/meminfo`` in bytes (None where there is none)."""
    try:
        with open("/proc/meminfo", encoding="ascii") as f:
            for line in f:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return None


def resident_memory() -> int | None:
    """This process's resident set in bytes (None where unknown)."""
    try:
        with open("/proc/self/statm", encoding="ascii") as f:
            return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")
    except (OSError, ValueError, IndexError, AttributeError):
        return None


def accelerator(plugin: Plugin) -> str | None:
    """The plug-in's device type when it declares one that is not the CPU (``cuda``, ``mps``)."""
    dev = getattr(plugin.obj, "device", None)
    kind = getattr(dev, "type", None) or (str(dev).split(":")[0] if dev is not None else None)
    return None if kind in (None, "", "cpu") else str(kind)


def scoring_seconds_per_audio_s(setup: Setup) -> float:
    """Metric ``prepare`` + ``score`` seconds per second of audio, on the contract probe against a
    copy with low-level noise (one thread). A failing metric counts as free."""
    sr = setup.plugin.sample_rate
    ref = probe_signal(sr)
    est = (ref + 1e-3 * np.random.default_rng(0).standard_normal(ref.shape)).astype(ref.dtype)
    total = 0.0
    with thread_limit(1, setup.plugin.obj):
        for m in setup.metrics:
            t0 = time.perf_counter()
            try:
                m.score(m.prepare(ref, sr), est, sr)
            except Exception:
                continue
            total += time.perf_counter() - t0
    return total / PROBE_SECONDS


def process_cap(setup: Setup, cores: int | None = None, memory: int | None = None,
                rss: int | None = None) -> Choice:
    """The most processes worth running: one per usable core, fewer when memory is short (each
    taken to need what this process holds now), one when the model runs on an accelerator."""
    cores = usable_cores() if cores is None else cores
    dev = accelerator(setup.plugin)
    if dev:
        return Choice(1, f"the model runs on {dev}: one process drives it")
    memory = available_memory() if memory is None else memory
    rss = resident_memory() if rss is None else rss
    cap = cores
    if memory and rss:
        cap = max(1, min(cap, 1 + memory // rss))      # this process is one of them
    if cap == cores:
        return Choice(cap, f"{cores} usable core{'s' if cores > 1 else ''}")
    return Choice(cap, f"{cores} usable cores, memory for {cap} processes ({_gib(memory)} "
                       f"available, {_gib(rss)} each)")


def choose_workers(setup: Setup, todo: Sequence[Job], per_eval_s: float | None,
                   prepare_s: float, reuse_possible: bool, cores: int | None = None,
                   memory: int | None = None, rss: int | None = None) -> Choice:
    """``[run] workers = "auto"``: the process count with the least estimated wall time of the
    sweep and the timing phase (``per_eval_s``: seconds per evaluation per second of audio, from
    the pre-flight estimate; ``prepare_s``: what preparing the run took here)."""
    limit = process_cap(setup, cores, memory, rss)
    cap = limit.value
    if cap == 1 or not todo:
        return Choice(1, "nothing to compute" if not todo else limit.reason)
    if per_eval_s is None:              # the probe failed: keep failures in this process
        return Choice(1, f"{limit.reason}, but the cost is unknown (the probe call failed)")
    utts, grid, tm = setup.testset.utterances, setup.grid, setup.config.timing
    score = scoring_seconds_per_audio_s(setup)
    sweep = sum(per_eval_s * grid[j.point].nfe * utts[j.utt].duration_s
                + score * utts[j.utt].duration_s for j in todo)
    have: dict[tuple[int, int], int] = {}
    for j in todo:
        have[(j.utt, j.point)] = have.get((j.utt, j.point), 0) + 1
    want = min(tm.repeats, MIN_SAMPLES)
    alone = reused = 0.0
    for job, u in timing_plan(setup):
        call = per_eval_s * grid[job.point].nfe * u.duration_s
        alone += (tm.warmup + want) * call
        reused += max(0, want - have.get((job.utt, job.point), 0)) * call
    start = prepare_s + HELPER_START_S
    walls = {1: sweep + (reused if reuse_possible else alone)}
    for w in range(2, cap + 1):
        walls[w] = (start + (sweep - start) / w if sweep > start else sweep) + alone
    best = min(walls, key=lambda w: (walls[w], w))
    est = ", ".join(f"{w}: {hms(walls[w])}" for w in sorted({1, best, cap}))
    why = (" (one process keeps its sweep calls as timing samples)" if best == 1 and reuse_possible
           else "")
    return Choice(best, f"{limit.reason}; estimated sweep + timing by processes {est}{why}")


def _gib(n: int | None) -> str:
    return "?" if n is None else f"{n / 2 ** 30:.1f} GiB"


def batch_invariance(plugin: Plugin, sampler: str, options: dict[str, Any] | None) -> float | None:
    """Largest |Δ| between two probe items synthesised alone and together (0.0: bit-identical);
    ``None`` when the plug-in cannot batch this sampler. Raises what the batched call raises."""
    many = plugin.batch_synthesizer(sampler, options)
    if many is None:
        return None
    one = plugin.synthesizer(sampler, options)
    sched, feats = probe_schedule(plugin), probe_features(plugin.frontend)
    with thread_limit(1, plugin.obj):
        alone = [np.asarray(one(feats, sched, np.random.default_rng(s)), dtype=np.float64)
                 for s in (0, 1)]
        together = [np.asarray(y, dtype=np.float64)
                    for y in many(feats, sched, [np.random.default_rng(s) for s in (0, 1)])]
    if any(a.shape != b.shape for a, b in zip(alone, together)):
        return float("inf")
    return float(max(np.max(np.abs(a - b)) if a.size else 0.0 for a, b in zip(alone, together)))


def choose_batch(setup: Setup, value: int | str) -> Choice:
    """``[run] batch``: a number is kept (with a warning in the reason when the probe shows the
    plug-in's items depend on their batch); ``"auto"`` as the module docstring says."""
    seeds = len(setup.config.seeds)
    if seeds < 2 or value == 1:
        return Choice(1, "one seed per utterance and configuration" if seeds < 2 else "as set")
    dev = accelerator(setup.plugin)
    if value == "auto" and not dev:
        return Choice(1, "on the CPU items run one at a time (batches measured slower per item)")
    sampler = setup.grid[0].sampler
    try:
        diff = batch_invariance(setup.plugin, sampler, setup.config.sampler_options.get(sampler))
    except Exception as e:
        return Choice(1, f"a batched probe call raised {type(e).__name__}: {e}; one at a time")
    if diff is None:
        return Choice(1, "the plug-in does not batch (an end-to-end vocoder needs "
                         "accepts_batch = True)")
    size = min(seeds, AUTO_MAX_BATCH) if value == "auto" else int(value)
    if diff == 0.0:
        return Choice(size, f"{'on ' + dev + ', ' if value == 'auto' else ''}the probe's items "
                            "are bit-identical alone and batched")
    if value == "auto":
        return Choice(1, f"the plug-in's output depends on its batch (probe: max |Δ| {diff:.3g}); "
                         "one at a time keeps results independent of the batch size")
    return Choice(size, f"as set, but the plug-in's output depends on its batch (probe: max |Δ| "
                        f"{diff:.3g}): results differ in the last bits from batch 1")
