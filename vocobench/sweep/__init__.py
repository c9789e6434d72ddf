"""The sweep: jobs are utterance × schedule × sampler × steps × seed.

:func:`prepare` validates everything (config, plug-in, test set, metrics, grid) and fingerprints
the vocoder's code before anything is written. :func:`run` then checks the run directory and its
journals, says what is reused and what the rest costs, holds the directory lock, runs the
quality sweep (each item journalled the moment it finishes) serially, in local processes or on
Dask, runs the timing phase alone (each repeat journalled), and renders tables and reports.

Modules, each importing only those listed after it: ``orchestrate`` (run, back-end choice,
reports, failure verdict) → ``preflight`` (reuse, estimate, plan), ``local`` (spawn pool),
``dask_backend`` → ``remote`` (chunks, worker-process state) → ``timing_phase`` → ``worker`` (one
job: synthesis, scoring, timeouts) → ``plan`` (grid, jobs, keys, fingerprint, manifest);
``progress`` stands alone; ``resources`` (workers and batch size) reads the plan and the
contract probe. Other packages use only the names below.
"""
from __future__ import annotations

from .dask_backend import run_dask
from .local import WorkerDied, run_local
from .orchestrate import render, run, run_jobs, run_parallel
from .plan import GridPoint, Job, Setup, build_grid, job_key, package_versions, prepare, timing_utterances
from .progress import Progress
from .remote import chunk_jobs
from .resources import process_cap
from .timing_phase import run_timing, timing_plan
from .worker import Worker, item_rng, load_utterance

__all__ = ["GridPoint", "Job", "Progress", "Setup", "Worker", "WorkerDied", "build_grid",
           "chunk_jobs", "item_rng", "job_key", "load_utterance", "package_versions", "prepare",
           "process_cap", "render", "run", "run_dask", "run_jobs", "run_local", "run_parallel",
           "run_timing", "timing_plan", "timing_utterances"]
