"""What both parallel back ends share: chunks of jobs, and the state a worker process holds.

A worker process rebuilds the run's :class:`~vocobench.sweep.plan.Setup` with
:func:`~vocobench.sweep.plan.prepare` from the parent's validated ``RunConfig`` and ``TestSet``
(:func:`payload`), so the user's vocoder is constructed once per process, and every item's noise
comes from its own seeded generator (:func:`~vocobench.sweep.worker.item_rng`): audio hashes and
scores equal those of ``--workers 1``. A worker whose job keys differ from the parent's (another
package version on a cluster node, say) stops the sweep instead of mixing results.
"""
from __future__ import annotations

import dataclasses
import math
import os
import pickle
from pathlib import Path
from typing import Any, Callable, ContextManager, Iterator, Sequence

from ..config import RunConfig
from ..testset import TestSet
from ..timing import thread_limit
from .plan import Identity, Job, Setup, prepare
from .worker import Worker

Record = dict[str, Any]
Sink = Callable[[Record], None]
Payload = tuple[RunConfig, str, TestSet, Identity]


def chunk_jobs(jobs: Sequence[Job], workers: int, max_size: int | None = None) -> list[list[Job]]:
    """Cut ``jobs`` into chunks for ``workers`` workers: utterance-major, shrinking, bounded.

    Chunk sizes follow *factoring* (Hummel, Schonberg & Flynn 1992, "Factoring: a method for
    scheduling parallel loops", CACM 35(8)), a refinement of guided self-scheduling
    (Polychronopoulos & Kuck 1987): each chunk takes ``ceil(R / (2·workers))`` of the ``R`` jobs
    still unassigned, so early chunks are large (each worker prepares an utterance once and
    reuses it) and the last ``2·workers`` jobs go out one at a time (no worker idles at the
    end while another finishes a long chunk). A chunk never spans two utterances and never
    exceeds ``max_size``. Within an utterance, jobs keep their order.
    """
    jobs = sorted(jobs, key=lambda j: j.utt)          # stable: utterance-major, order kept
    chunks: list[list[Job]] = []
    i, n, p = 0, len(jobs), max(1, workers)
    while i < n:
        size = math.ceil((n - i) / (2 * p))
        if max_size:
            size = min(size, max_size)
        j = i + 1
        while j < n and j - i < size and jobs[j].utt == jobs[i].utt:
            j += 1
        chunks.append(list(jobs[i:j]))
        i = j
    return chunks


def _absolute(cfg: RunConfig) -> RunConfig:
    """Copy of ``cfg`` with every path made absolute (workers may run in another directory)."""
    def fix(v: Any) -> Any:
        if isinstance(v, Path):
            return v.resolve()
        if isinstance(v, list) and v and all(isinstance(x, Path) for x in v):
            return [x.resolve() for x in v]
        return v

    return dataclasses.replace(cfg, **{f.name: fix(getattr(cfg, f.name))
                                       for f in dataclasses.fields(cfg) if f.init})


def payload(setup: Setup) -> Payload:
    """What a worker needs to rebuild the Setup, minus work the main process already did: the
    version file's hash (carried as the resolved version), the code fingerprint (carried as
    the identity, so a file edited during the sweep cannot split the keys) and the
    ``[decide]`` check."""
    cfg = dataclasses.replace(_absolute(setup.config), version=setup.plugin.version,
                              version_file=None, decide={})
    return cfg, str(Path(setup.out_dir).resolve()), setup.testset, setup.identity


class Slot:
    """One worker's state: the rebuilt Setup, its ``Worker`` (with the LRU) and its job keys."""

    def __init__(self, data: Payload) -> None:
        cfg, out_dir, testset, identity = data
        self.setup = prepare(cfg, out_dir, testset=testset, identity=identity)
        self.worker = Worker(self.setup)
        self.keys = {j.key for j in self.setup.jobs}

    def thread_limit(self) -> ContextManager[Any]:
        """One BLAS/OpenMP thread and one plug-in thread (see :func:`vocobench.timing.thread_limit`)."""
        return thread_limit(1, self.setup.plugin.obj)

    def run(self, jobs: Sequence[Job]) -> Iterator[Record]:
        """Records of ``jobs`` (:meth:`Worker.run`), after checking their keys are this worker's."""
        for job in jobs:
            if job.key not in self.keys:
                raise RuntimeError(
                    f"worker {where()} derives different job keys than the main process (job "
                    f"{job.key}): its vocoder description, metric variants or package versions "
                    "differ; give every worker the same environment")
        return self.worker.run(jobs)


def where() -> str:
    """``host:pid`` of this process, for messages about a worker."""
    import socket

    return f"{socket.gethostname()}:{os.getpid()}"


class RemoteTraceback(Exception):
    """Carries a worker's traceback text as the ``__cause__`` of a re-raised exception."""

    def __init__(self, tb: str) -> None:
        super().__init__(tb)
        self.tb = tb

    def __str__(self) -> str:
        return f"\n(in worker)\n{self.tb}"


def portable(exc: BaseException) -> BaseException:
    """``exc`` itself if it survives pickling, else a RuntimeError with its type and message."""
    try:
        pickle.loads(pickle.dumps(exc))
        return exc
    except Exception:
        return RuntimeError(f"{type(exc).__name__}: {exc}")
