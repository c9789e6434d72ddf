"""Cost of the default metric set on a 10 s utterance at 22.05 kHz, single thread.

Plain script: ``python bench/bench_metrics.py [metric ...]``. Prints per-metric prepare / score
wall times (median of repeats, after one warm-up call), the CPU time of the same calls (less
sensitive to other load on a shared machine) and the totals; target for the default set
(mcd, pesq_wb, stoi), prepare + score: <= 0.3 s. The test signal is the synthetic speech-like
signal of tests/test_metrics_synth.py with white noise at 25 dB SNR as the "output".
Metrics whose optional extra is missing are skipped with the reason; ``f0`` is also timed with
its other trackers (``f0[yin]``, and ``f0[praat]`` when praat-parselmouth is installed).
"""
from __future__ import annotations

import importlib.util
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from test_metrics_synth import degrade, speech_like  # noqa: E402

from vocobench.metrics import DEFAULT_METRICS, REGISTRY, build_metrics  # noqa: E402
from vocobench.metrics.base import missing_requirements  # noqa: E402

SR = 22050
SECONDS = 10.0
TARGET_S = 0.3
REPEATS = 5


def _median_time(fn, repeats: int) -> tuple[float, float, object]:
    """(median wall s, median CPU s, last result)."""
    out = fn()                                    # warm-up: lazy imports, caches, JIT
    wall, cpu = [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        out = fn()
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return statistics.median(wall), statistics.median(cpu), out


def _metrics(names):
    """(label, metric) pairs: the named metrics with their extras installed, f0 per tracker."""
    out = []
    for name in names:
        missing = missing_requirements(name) if name in REGISTRY else []
        if missing:
            print(f"{name:<10} skipped: needs {', '.join(missing)} (extra 'quality')")
            continue
        out.append((name, build_metrics([name])[0]))
        if name == "f0":
            trackers = ["yin"] + ([] if importlib.util.find_spec("parselmouth") is None
                                  else ["praat"])
            out += [(f"f0[{t}]", build_metrics(["f0"], {"f0": {"tracker": t}})[0])
                    for t in trackers]
    return out


def main(names=None) -> None:
    names = list(names or REGISTRY)
    ref = speech_like(SR, SECONDS, seed=0)
    est = degrade(ref, SR, snr_db=25.0)
    print(f"{SECONDS:g} s at {SR} Hz, single thread, median of {REPEATS}")
    print(f"{'metric':<10} {'prepare s':>10} {'score s':>10} {'total s':>10} {'total cpu s':>12}")
    totals = {}
    with threadpool_limits(1):
        for label, m in _metrics(names):
            t_prep, c_prep, state = _median_time(lambda: m.prepare(ref, SR), REPEATS)
            t_score, c_score, _ = _median_time(lambda: m.score(state, est, SR), REPEATS)
            totals[label] = (t_prep, t_score, c_prep + c_score)
            print(f"{label:<10} {t_prep:10.4f} {t_score:10.4f} {t_prep + t_score:10.4f} "
                  f"{c_prep + c_score:12.4f}")
    default = [n for n in DEFAULT_METRICS if n in totals]
    prep = sum(totals[n][0] for n in default)
    score = sum(totals[n][1] for n in default)
    cpu = sum(totals[n][2] for n in default)
    print(f"default set {default}: prepare+score {prep + score:.3f} s wall, {cpu:.3f} s CPU "
          f"(score only, reference prepared once: {score:.3f} s); target <= {TARGET_S} s")


if __name__ == "__main__":
    main(sys.argv[1:] or None)
