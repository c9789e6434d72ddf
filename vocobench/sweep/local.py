"""The local back end (``--workers N``): N computing processes, this one included.

This process is worker 0 (it also journals); the N − 1 helpers are started with the ``spawn``
method (no forked copies of this process's threads, locks or GPU context). A helper needs seconds
to start (imports); meanwhile worker 0 computes and takes back chunks queued for helpers still
starting, so short sweeps and small resumes pay no start-up. Records come back to the parent,
which journals each one the moment it arrives. Jobs go out utterance-major in chunks
(:func:`~vocobench.sweep.remote.chunk_jobs`), so a worker's per-utterance LRU is hit. Helpers
limit BLAS/OpenMP threads and the plug-in's own to 1. As with any ``spawn`` pool, a script that
calls :func:`vocobench.sweep.run` with ``workers > 1`` must do so under
``if __name__ == "__main__":``.
"""
from __future__ import annotations

import collections
import os
import pickle
import queue
import re
import signal
import sys
import time
import traceback
from typing import Any, Sequence

from ..errors import InputError
from ..timing import thread_limit
from .plan import Job, Setup
from .remote import RemoteTraceback, Sink, Slot, chunk_jobs, payload, portable
from .worker import Worker

MAIN_COMPUTES = True         # the main process is worker 0 (see run_local)
PREFETCH = 2                 # chunks queued ahead per helper, so none waits for the main process
POLL_S = 0.5                 # how often the main process checks helper liveness while waiting
JOIN_GRACE_S = 2.0           # after the last item: time for idle helpers to read their sentinel
THREAD_ENV = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
              "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")


class WorkerDied(InputError, RuntimeError):
    """A worker process ended abnormally (killed, out of memory, crashed in native code).

    An :class:`InputError` on field ``run.workers``: the CLI prints it on one line (exit 2),
    with the way to see the cause (``--workers 1``); finished items are kept."""

    def __init__(self, message: str, workers: int | None = None, source: str | None = None) -> None:
        super().__init__(message, source=source, field="run.workers", value=workers)


def _local_worker(data: bytes, tasks: Any, results: Any, parent: int) -> None:
    """Helper process: build the Setup once, then run chunks until the ``None`` sentinel."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)       # the parent handles Ctrl-C
    for name in THREAD_ENV:                             # libraries loaded from now on
        os.environ[name] = "1"
    # ``parent``: the main process's pid, passed in (asking getppid() here would give init's
    # when the main process died while this one was still starting, and it would never stop)
    try:
        slot = Slot(pickle.loads(data))
        with slot.thread_limit():                       # libraries already loaded
            while True:
                try:
                    chunk = tasks.get(timeout=1.0)
                except queue.Empty:
                    if os.getppid() != parent:          # orphaned: the parent was killed
                        results.cancel_join_thread()    # nobody reads: do not wait to flush
                        return
                    continue
                if chunk is None:
                    return
                for rec in slot.run(chunk):
                    results.put(("item", rec))
                results.put(("done",))
    except BaseException as e:                          # noqa: BLE001 — reported to the parent
        results.put(("error", portable(e), traceback.format_exc()))


def run_local(setup: Setup, jobs: Sequence[Job], sink: Sink, workers: int) -> None:
    """Run ``jobs`` on ``workers`` local processes; every record goes to ``sink`` on arrival.

    With :data:`MAIN_COMPUTES` (the default) this process is worker 0: it computes chunks itself
    between journalling the helpers' records, so ``workers`` processes compute and only
    ``workers − 1`` are spawned; while the helpers are still starting (imports take seconds) it
    takes back the chunks queued for them, so a short sweep or resume costs no start-up at all.
    Returns only after every helper has exited (the timing phase must run alone).
    """
    chunks = collections.deque(chunk_jobs(jobs, workers))
    if not chunks:
        return
    helpers = (workers - 1 if MAIN_COMPUTES else workers)
    helpers = min(helpers, len(chunks) - 1 if MAIN_COMPUTES else len(chunks))
    own = Worker(setup) if MAIN_COMPUTES else None
    with thread_limit(1, setup.plugin.obj):
        if helpers <= 0:
            for chunk in chunks:
                for rec in own.run(chunk):      # type: ignore[union-attr]
                    sink(rec)
            return
        _LocalPool(setup, helpers, workers).run(chunks, own, sink, len(jobs))


class _LocalPool:
    """Spawned helpers fed from a shared queue, ``PREFETCH`` chunks ahead per helper."""

    def __init__(self, setup: Setup, helpers: int, workers: int) -> None:
        import multiprocessing as mp

        ctx = mp.get_context("spawn")
        self.tasks, self.results = ctx.Queue(), ctx.Queue()
        data = pickle.dumps(payload(setup))
        # not daemonic: a user's vocoder may start processes of its own; stop() always reaps them
        me = os.getpid()
        self.procs = [ctx.Process(target=_local_worker, args=(data, self.tasks, self.results, me),
                                  name=f"vocobench-worker-{i + 1}") for i in range(helpers)]
        self.source, self.workers = setup.config.source, workers
        self.closed = False                 # sentinels sent: no more chunks for the helpers
        self.can_steal = True

    def run(self, chunks: collections.deque[list[Job]], own: Worker | None, sink: Sink,
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
                    for rec in own.process_group(own.next_group(mine)):  # type: ignore[union-attr]
                        sink(rec)
                        pending -= 1
                elif pending:
                    pending -= self._collect(chunks, sink, block=True)
            ok = True
        finally:
            self._stop(graceful=ok)

    def _feed(self, chunks: collections.deque[list[Job]], n: int) -> None:
        for _ in range(n):
            if chunks:
                self.tasks.put(chunks.popleft())
        if not chunks and not self.closed:
            for _ in self.procs:
                self.tasks.put(None)
            self.closed = True

    def _steal(self) -> list[Job]:
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

    def _collect(self, chunks: collections.deque[list[Job]], sink: Sink, block: bool) -> int:
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
                        _check_alive(self.procs, self.workers, self.source)
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
                    raise exc from RemoteTraceback(tb)

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


def _check_alive(procs: list[Any], n: int, source: str | None = None) -> None:
    for p in procs:
        if p.exitcode not in (None, 0):
            how = f"signal {-p.exitcode}" if p.exitcode < 0 else f"exit code {p.exitcode}"
            hint = MAIN_GUARD_HINT if p.exitcode == 1 and main_script_unguarded() else \
                "; run with --workers 1 to see the cause in this process"
            raise WorkerDied(f"worker process {p.pid} died ({how}){hint}; finished items are "
                             "kept, re-run to resume", n, source)
    if all(p.exitcode == 0 for p in procs):
        raise WorkerDied("all worker processes exited with items outstanding", n, source)


MAIN_GUARD_HINT = ("; a script that runs a sweep with workers > 1 must call it under "
                   "'if __name__ == \"__main__\":' (spawned workers import the script again)")
_GUARD = re.compile(r"""__name__\s*==\s*['"]__main__['"]""")


def main_script_unguarded() -> bool:
    """Whether this process runs a script file whose top level lacks the ``__main__`` guard:
    a spawned worker imports that script again and, unguarded, starts a sweep itself and dies
    with exit code 1. Otherwise (``vocobench run``, ``python -m``, a guarded script) the hint
    about the guard would mislead."""
    main = sys.modules.get("__main__")
    path = getattr(main, "__file__", None)
    if not path or getattr(main, "__spec__", None) is not None:
        return False
    try:
        with open(path, encoding="utf-8", errors="replace") as f:
            return _GUARD.search(f.read()) is None
    except OSError:
        return False
