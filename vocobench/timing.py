"""Latency measurement, kept apart from scoring: warm-up, repeats, thread limits, device sync.

Each timed call is bracketed by the plug-in's ``synchronize()`` (e.g. ``torch.cuda.synchronize``):
GPU work is asynchronous, and timing without synchronisation measures only the kernel launches
(common practice, no source). Times come from ``time.perf_counter``.
"""
from __future__ import annotations

import contextlib
import os
import platform
import sys
import time
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Sequence


# Sequential stopping of repeats: the fixed-width sequential confidence interval of Chow & Robbins
# 1965 ("On the asymptotic theory of fixed-width sequential confidence intervals for the mean",
# Ann. Math. Statist. 36): sample until the interval's half-width is within the set width. It is
# applied to log-times (run times are skewed and multiplicative, so the mean of their logarithm
# estimates the log of the median), with Student's t interval; at least MIN_SAMPLES samples.
CONFIDENCE = 0.95
MIN_SAMPLES = 3


def median_rel_halfwidth(seconds: Sequence[float], confidence: float = CONFIDENCE) -> float:
    """Relative half-width of the ``confidence`` interval for the median time: ``exp(t·s/√n) − 1``
    of the log-times (t: Student's quantile, n − 1 degrees of freedom); ``inf`` below 2 samples."""
    import math

    x = [math.log(v) for v in seconds if v > 0]
    n = len(x)
    if n < 2:
        return math.inf
    from scipy.stats import t as student

    mean = sum(x) / n
    sd = math.sqrt(sum((v - mean) ** 2 for v in x) / (n - 1))
    return math.expm1(float(student.ppf(0.5 + confidence / 2, n - 1)) * sd / math.sqrt(n))


def enough(seconds: Sequence[float], rel_width: float) -> bool:
    """Whether repeats may stop: at least :data:`MIN_SAMPLES` and the median's interval within
    ± ``rel_width`` (``rel_width`` 0 never stops early)."""
    return rel_width > 0 and len(seconds) >= MIN_SAMPLES and \
        median_rel_halfwidth(seconds) <= rel_width


@dataclass(frozen=True)
class Timing:
    first_s: float              # the first call (lazy initialisation, compilation): reported apart
    seconds: list[float]        # the timed repeats after warm-up
    result: Any = None


def time_call(fn: Callable[[], Any], *, warmup: int = 1, repeats: int = 3,
              sync: Callable[[], None] | None = None, indices: Sequence[int] | None = None,
              on_time: Callable[[int, float], None] | None = None, first: bool = True,
              stop: Callable[[list[float]], bool] | None = None) -> Timing:
    """Call ``fn`` ``warmup`` times (the first one timed apart), then time ``repeats`` calls.

    ``indices``: which repeats to time (default ``range(repeats)``; a resumed block times only
    the missing ones). ``on_time(index, seconds)`` is called after every timed call, index −1
    for the first one, so that each measurement can be kept the moment it exists. ``first=False``
    (the process is already warm) skips the first call and the warm-up; ``stop(times)`` ends the
    repeats early when it returns true (see :func:`enough`).
    """
    sync = sync or (lambda: None)
    note = on_time or (lambda i, s: None)

    def once() -> tuple[float, Any]:
        sync()
        t0 = time.perf_counter()
        out = fn()
        sync()
        return time.perf_counter() - t0, out

    first_s, result = float("nan"), None
    if first:
        first_s, result = once()
        note(-1, first_s)
        for _ in range(max(warmup - 1, 0)):
            once()
    times: list[float] = []
    for i in (range(repeats) if indices is None else indices):
        if stop is not None and stop(times):
            break
        dt, result = once()
        times.append(dt)
        note(i, dt)
    return Timing(first_s, times, result)


_CONTROLLER: list[Any] = [None, -1]     # threadpoolctl's scan of loaded libraries, reused


@contextlib.contextmanager
def thread_limit(n: int, plugin_obj: Any = None) -> Iterator[None]:
    """Limit BLAS/OpenMP threads (threadpoolctl) and the plug-in's own (``set_threads``) to ``n``."""
    from threadpoolctl import ThreadpoolController

    setter = getattr(plugin_obj, "set_threads", None)
    if callable(setter):
        setter(n)
    if _CONTROLLER[1] != len(sys.modules):   # a new import may have loaded a BLAS or OpenMP
        _CONTROLLER[:] = [ThreadpoolController(), len(sys.modules)]
    with _CONTROLLER[0].limit(limits=n):
        yield


def hardware() -> dict[str, Any]:
    """What the latency figures were measured on."""
    info: dict[str, Any] = {"platform": platform.platform(), "machine": platform.machine(),
                            "processor": _cpu_model(), "cpu_count": os.cpu_count(),
                            "python": platform.python_version()}
    try:
        info["affinity"] = len(os.sched_getaffinity(0))
    except AttributeError:
        pass
    return info


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as f:
            for line in f:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor()
