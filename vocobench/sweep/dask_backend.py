"""The Dask back end (``--scheduler ADDRESS``; optional, ``pip install 'vocobench[dask]'``).

The workers need the same Python packages and the same paths as this machine (test set, plug-in
search path and, when audio is saved, the run directory) — a shared filesystem. Each Dask worker
process runs one vocobench chunk at a time (the user's vocoder is never called from two threads
at once): scale with worker processes, one thread each. Chunks are bounded
(:data:`DASK_MAX_CHUNK`) so that records, journalled per chunk as its future completes, stream
back often. ``run.item_timeout_s`` is not enforced there (tasks run off the main thread, where
``SIGALRM`` cannot reach them).
"""
from __future__ import annotations

import threading
import uuid
from pathlib import Path
from typing import Any, Sequence

from ..errors import InputError
from .plan import Job, Setup
from .remote import Payload, Record, Sink, Slot, chunk_jobs, payload, where

DASK_MAX_CHUNK = 16          # Dask returns whole chunks: bounded, so results stream back often
DASK_CONNECT_TIMEOUT_S = 10.0

_DASK_SLOTS: dict[str, Slot] = {}           # run id -> this Dask worker process's Setup
_DASK_LOCK = threading.Lock()               # one chunk at a time per process (see module doc)


def _dask_chunk(run_id: str, data: Payload, jobs: list[Job]) -> list[Record]:
    """Dask task: run one chunk on this worker, building the Setup on first use."""
    with _DASK_LOCK:
        slot = _DASK_SLOTS.get(run_id)
        if slot is None:
            missing = [u.path for u in data[2].utterances if not Path(u.path).is_file()][:1]
            if missing:
                raise InputError(f"test set file not visible on Dask worker {where()}; the "
                                 "workers need the same paths as the client (a shared filesystem)",
                                 source=str(missing[0]))
            slot = _DASK_SLOTS[run_id] = Slot(data)
        with slot.thread_limit():
            return list(slot.run(jobs))


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


def run_dask(setup: Setup, jobs: Sequence[Job], sink: Sink, scheduler: str) -> None:
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
        [data] = client.scatter([payload(setup)], broadcast=True, hash=False)
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
