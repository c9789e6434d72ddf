"""Parallel quality sweeps: a local process pool (``--workers N``) or a Dask cluster (``--scheduler``).

Both back ends plug into :func:`vocobench.runner.run_jobs` and keep the serial sweep's guarantees:

* **Same results.** Each worker rebuilds the run's :class:`~vocobench.runner.Setup` with
  :func:`~vocobench.runner.prepare` from the parent's validated ``RunConfig`` and ``TestSet``, so the
  user's vocoder is constructed once per worker, and every item's noise comes from its own seeded
  generator (:func:`~vocobench.runner.item_rng`): audio hashes and scores equal those of
  ``--workers 1``. A worker whose job keys differ from the parent's (another package version on a
  cluster node, say) stops the sweep instead of mixing results.
* **Resume.** Records come back to the parent, which journals each one the moment it arrives
  (local: per item; Dask: per chunk, as the chunk's future completes).
* **Cache locality and streaming.** Jobs go out utterance-major in chunks, so a worker's
  per-utterance LRU (reference audio, features, metric states; two entries) is hit; audio is
  loaded per chunk and released, so memory does not grow with the test set.
* **No oversubscription.** Workers limit BLAS/OpenMP threads (threadpoolctl) and the plug-in's own
  (``set_threads``) to 1; the timing phase runs after the pool has exited.

Locally, ``workers = N`` means N computing processes: this one (worker 0, which also journals)
and N − 1 helpers started with the ``spawn`` method (no forked copies of this process's threads,
locks or GPU context). A helper needs seconds to start (imports); meanwhile worker 0 computes and
takes back chunks queued for helpers still starting, so short sweeps and small resumes pay no
start-up. As with any ``spawn`` pool, a script that calls :func:`vocobench.runner.run` with
``workers > 1`` must do so under ``if __name__ == "__main__":``.

Dask (optional, ``pip install 'vocobench[dask]'``): the workers need the same Python packages and
the same paths as this machine (test set, plug-in search path and, when audio is saved, the run
directory) — a shared filesystem. Each Dask worker process runs one vocobench chunk at a time
(the user's vocoder is never called from two threads at once): scale with worker processes,
one thread each. ``run.item_timeout_s`` is not enforced there (tasks run off the main thread, where
``SIGALRM`` cannot reach them).
"""
from __future__ import annotations

import collections
import dataclasses
import math
import os
import pickle
import queue
import signal
import threading
import time
import traceback
import uuid
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Sequence

from .errors import InputError

if TYPE_CHECKING:
    from .config import RunConfig
    from .runner import Job, Setup, Worker
    from .testset import TestSet

Record = dict[str, Any]
Sink = Callable[[Record], None]

DASK_MAX_CHUNK = 16          # Dask returns whole chunks: bounded, so results stream back often
MAIN_COMPUTES = True         # the main process is worker 0 (see run_local)
PREFETCH = 2                 # chunks queued ahead per helper, so none waits for the main process
POLL_S = 0.5                 # how often the main process checks helper liveness while waiting
JOIN_GRACE_S = 2.0           # after the last item: time for idle helpers to read their sentinel
DASK_CONNECT_TIMEOUT_S = 10.0
THREAD_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
              "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")


def run_parallel(setup: "Setup", jobs: Sequence["Job"], sink: Sink, *, workers: int | None,
                 scheduler: str | None) -> None:
    """Run ``jobs`` on a Dask cluster (``scheduler`` given) or in ``workers`` local processes.

    ``sink(record)`` is called in this process for every finished item, in completion order.
    """
    if scheduler:
        run_dask(setup, jobs, sink, scheduler)
        return
    n = 1 if workers is None else workers
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise InputError("must be a positive integer", field="run.workers", value=workers)
    run_local(setup, jobs, sink, n)


# -- chunking ---------------------------------------------------------------------------------
def chunk_jobs(jobs: Sequence["Job"], workers: int, max_size: int | None = None) -> list[list["Job"]]:
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


# -- what a worker holds ----------------------------------------------------------------------
def _absolute(cfg: "RunConfig") -> "RunConfig":
    """Copy of ``cfg`` with every path made absolute (workers may run in another directory)."""
    def fix(v: Any) -> Any:
        if isinstance(v, Path):
            return v.resolve()
        if isinstance(v, list) and v and all(isinstance(x, Path) for x in v):
            return [x.resolve() for x in v]
        return v

    return dataclasses.replace(cfg, **{f.name: fix(getattr(cfg, f.name))
                                       for f in dataclasses.fields(cfg) if f.init})


def _payload(setup: "Setup") -> tuple["RunConfig", str, "TestSet"]:
    """What a worker needs to rebuild the Setup, minus work the main process already did: the
    version file's hash (carried as the resolved version) and the ``[decide]`` check."""
    cfg = dataclasses.replace(_absolute(setup.config), version=setup.plugin.version,
                              version_file=None, decide={})
    return cfg, str(Path(setup.out_dir).resolve()), setup.testset


class _Slot:
    """One worker's state: the rebuilt Setup, its ``Worker`` (with the LRU) and its job keys."""

    def __init__(self, payload: tuple["RunConfig", str, "TestSet"]) -> None:
        from .runner import Worker, prepare
        from .timing import thread_limit

        cfg, out_dir, testset = payload
        self.setup = prepare(cfg, out_dir, testset=testset)
        self.worker: Worker = Worker(self.setup)
        self.keys = {j.key for j in self.setup.jobs}
        self.thread_limit = lambda: thread_limit(1, self.setup.plugin.obj)

    def process(self, job: "Job") -> Record:
        if job.key not in self.keys:
            raise RuntimeError(
                f"worker {_where()} derives different job keys than the main process (job "
                f"{job.key}): its vocoder description, metric variants or package versions "
                "differ; give every worker the same environment")
        return self.worker.process(job)


def _where() -> str:
    import socket

    return f"{socket.gethostname()}:{os.getpid()}"


class _RemoteTraceback(Exception):
    """Carries a worker's traceback text as the ``__cause__`` of a re-raised exception."""

    def __init__(self, tb: str) -> None:
        super().__init__(tb)
        self.tb = tb

    def __str__(self) -> str:
        return f"\n(in worker)\n{self.tb}"


def _portable(exc: BaseException) -> BaseException:
    """``exc`` itself if it survives pickling, else a RuntimeError with its type and message."""
    try:
        pickle.loads(pickle.dumps(exc))
        return exc
    except Exception:
        return RuntimeError(f"{type(exc).__name__}: {exc}")


# -- local process pool ---------------------------------------------------------------------
def _local_worker(payload: bytes, tasks: Any, results: Any) -> None:
    """Helper process: build the Setup once, then run chunks until the ``None`` sentinel."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)       # the parent handles Ctrl-C
    for name in THREAD_ENV:                             # libraries loaded from now on
        os.environ[name] = "1"
    parent = os.getppid()
    try:
        slot = _Slot(pickle.loads(payload))
        with slot.thread_limit():                       # libraries already loaded
            while True:
                try:
                    chunk = tasks.get(timeout=1.0)
                except queue.Empty:
                    if os.getppid() != parent:          # orphaned: the parent was killed
                        return
                    continue
                if chunk is None:
                    return
                for job in chunk:
                    results.put(("item", slot.process(job)))
                results.put(("done",))
    except BaseException as e:                          # noqa: BLE001 — reported to the parent
        results.put(("error", _portable(e), traceback.format_exc()))


class WorkerDied(RuntimeError):
    """A worker process ended abnormally (killed, out of memory, crashed in native code)."""


def run_local(setup: "Setup", jobs: Sequence["Job"], sink: Sink, workers: int) -> None:
    """Run ``jobs`` on ``workers`` local processes; every record goes to ``sink`` on arrival.

    With :data:`MAIN_COMPUTES` (the default) this process is worker 0: it computes chunks itself
    between journalling the helpers' records, so ``workers`` processes compute and only
    ``workers − 1`` are spawned; while the helpers are still starting (imports take seconds) it
    takes back the chunks queued for them, so a short sweep or resume costs no start-up at all.
    Returns only after every helper has exited (the timing phase must run alone).
    """
    from .runner import Worker
    from .timing import thread_limit

    chunks = collections.deque(chunk_jobs(jobs, workers))
    if not chunks:
        return
    helpers = (workers - 1 if MAIN_COMPUTES else workers)
    helpers = min(helpers, len(chunks) - 1 if MAIN_COMPUTES else len(chunks))
    own = Worker(setup) if MAIN_COMPUTES else None
    with thread_limit(1, setup.plugin.obj):
        if helpers <= 0:
            for chunk in chunks:
                for job in chunk:
                    sink(own.process(job))      # type: ignore[union-attr]
            return
        _LocalPool(setup, helpers).run(chunks, own, sink, len(jobs))


class _LocalPool:
    """Spawned helpers fed from a shared queue, ``PREFETCH`` chunks ahead per helper."""

    def __init__(self, setup: "Setup", helpers: int) -> None:
        import multiprocessing as mp

        ctx = mp.get_context("spawn")
        self.tasks, self.results = ctx.Queue(), ctx.Queue()
        payload = pickle.dumps(_payload(setup))
        # not daemonic: a user's vocoder may start processes of its own; stop() always reaps them
        self.procs = [ctx.Process(target=_local_worker, args=(payload, self.tasks, self.results),
                                  name=f"vocobench-worker-{i + 1}") for i in range(helpers)]
        self.closed = False                 # sentinels sent: no more chunks for the helpers
        self.can_steal = True

    def run(self, chunks: "collections.deque[list[Job]]", own: "Worker | None", sink: Sink,
            pending: int) -> None:
        ok = False
        try:
            for p in self.procs:
                p.start()
            self._feed(chunks, PREFETCH * len(self.procs))
            mine: collections.deque[Job] = collections.deque()
            while pending:
                pending -= self._collect(chunks, sink, block=False)
                if not mine and own is not None:
                    mine.extend(chunks.popleft() if chunks else self._steal())
                    self._feed(chunks, 0)               # deque empty: the helpers may finish
                if mine:
                    sink(own.process(mine.popleft()))       # type: ignore[union-attr]
                    pending -= 1
                elif pending:
                    pending -= self._collect(chunks, sink, block=True)
            ok = True
        finally:
            self._stop(graceful=ok)

    def _feed(self, chunks: "collections.deque[list[Job]]", n: int) -> None:
        for _ in range(n):
            if chunks:
                self.tasks.put(chunks.popleft())
        if not chunks and not self.closed:
            for _ in self.procs:
                self.tasks.put(None)
            self.closed = True

    def _steal(self) -> list["Job"]:
        """A chunk queued for the helpers but not yet taken (they may still be starting)."""
        if not self.can_steal:
            return []
        try:
            chunk = self.tasks.get(block=False)
        except queue.Empty:
            return []
        if chunk is None:                   # only sentinels are left: put it back, stop stealing
            self.tasks.put(None)
            self.can_steal = False
            return []
        return chunk

    def _collect(self, chunks: "collections.deque[list[Job]]", sink: Sink, block: bool) -> int:
        """Handle the helpers' messages; with ``block``, wait (and watch liveness) for one."""
        got = 0
        while True:
            try:
                msg = self.results.get(timeout=POLL_S) if block and not got else \
                    self.results.get(block=False)
            except queue.Empty:
                if block and not got and any(p.exitcode is not None for p in self.procs):
                    got += self._collect(chunks, sink, block=False)   # last items in flight
                    if not got:
                        _check_alive(self.procs)
                return got
            if msg[0] == "item":
                sink(msg[1])
                got += 1
            elif msg[0] == "done":
                self._feed(chunks, 1)
            else:
                _, exc, tb = msg
                try:
                    self._collect(chunks, sink, block=False)           # keep what others finished
                finally:
                    raise exc from _RemoteTraceback(tb)

    def _stop(self, graceful: bool) -> None:
        """Reap every helper: those idle at their sentinel exit at once; any still starting or
        (after an error) working are terminated — every item they could return is in."""
        if not self.closed:
            for _ in self.procs:
                self.tasks.put(None)
        deadline = time.monotonic() + (JOIN_GRACE_S if graceful else 0.0)
        for p in self.procs:
            if p.pid is None:                   # never started
                continue
            p.join(max(0.0, deadline - time.monotonic()))
            if p.is_alive():
                p.terminate()
                p.join(5.0)
            if p.is_alive():
                p.kill()
                p.join()
        self.tasks.cancel_join_thread()         # unread chunks after an abort: do not block
        self.tasks.close()
        self.results.close()


def _check_alive(procs: list[Any]) -> None:
    for p in procs:
        if p.exitcode not in (None, 0):
            how = f"signal {-p.exitcode}" if p.exitcode < 0 else f"exit code {p.exitcode}"
            hint = (" (a script that runs a sweep with workers > 1 must call it under "
                    "'if __name__ == \"__main__\":')") if p.exitcode == 1 else ""
            raise WorkerDied(f"worker process {p.pid} died ({how}){hint}; finished items are "
                             "kept, re-run to resume")
    if all(p.exitcode == 0 for p in procs):
        raise WorkerDied("all worker processes exited with items outstanding")


# -- Dask ------------------------------------------------------------------------------------
_DASK_SLOTS: dict[str, _Slot] = {}          # run id -> this Dask worker process's Setup
_DASK_LOCK = threading.Lock()               # one chunk at a time per process (see module doc)


def _dask_chunk(run_id: str, payload: tuple, jobs: list["Job"]) -> list[Record]:
    """Dask task: run one chunk on this worker, building the Setup on first use."""
    with _DASK_LOCK:
        slot = _DASK_SLOTS.get(run_id)
        if slot is None:
            missing = [u.path for u in payload[2].utterances if not Path(u.path).is_file()][:1]
            if missing:
                raise InputError(f"test set file not visible on Dask worker {_where()}; the "
                                 "workers need the same paths as the client (a shared filesystem)",
                                 source=str(missing[0]))
            slot = _DASK_SLOTS[run_id] = _Slot(payload)
        with slot.thread_limit():
            return [slot.process(j) for j in jobs]


def _dask_forget(run_id: str) -> bool:
    """Drop this run's Setup from a Dask worker (``client.run`` target; never blocks)."""
    return _DASK_SLOTS.pop(run_id, None) is not None


def _import_dask() -> tuple[Any, Any]:
    try:
        from dask.distributed import Client, as_completed
    except ImportError:
        raise InputError("the Dask back end needs dask.distributed; install it with "
                         "pip install 'vocobench[dask]'", field="run.scheduler") from None
    return Client, as_completed


def run_dask(setup: "Setup", jobs: Sequence["Job"], sink: Sink, scheduler: str) -> None:
    """Run ``jobs`` on the Dask cluster at ``scheduler``; each chunk's records go to ``sink``."""
    Client, as_completed = _import_dask()
    if not jobs:
        return
    try:
        client = Client(scheduler, timeout=DASK_CONNECT_TIMEOUT_S, set_as_default=False)
    except Exception as e:          # OSError, TimeoutError, ValueError for a malformed address
        raise InputError(f"cannot reach the Dask scheduler: {type(e).__name__}: {e}",
                         field="run.scheduler", value=scheduler) from None
    run_id = uuid.uuid4().hex
    futures: list[Any] = []
    try:
        n = max(1, len(client.scheduler_info().get("workers", {})))
        [data] = client.scatter([_payload(setup)], broadcast=True, hash=False)
        for i, chunk in enumerate(chunk_jobs(jobs, n, max_size=DASK_MAX_CHUNK)):
            futures.append(client.submit(_dask_chunk, run_id, data, chunk, pure=False,
                                         key=f"vocobench-{run_id[:12]}-{i}"))
        with client.as_current():
            for fut in as_completed(futures):
                for rec in fut.result():
                    sink(rec)
    finally:
        try:
            client.cancel(futures)
            client.run(_dask_forget, run_id)
        except Exception:           # cleanup must not hide the sweep's own error
            pass
        finally:
            client.close()
