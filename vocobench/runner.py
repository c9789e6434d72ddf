"""The sweep: jobs are utterance × schedule × sampler × steps × seed.

``prepare`` validates everything (config, plug-in, test set, metrics, grid) before anything is
written. ``run`` then holds the directory lock, skips jobs already in the journal (resume), runs the
quality sweep (each item journalled the moment it finishes), runs the timing phase alone, and
renders tables and reports.
"""
from __future__ import annotations

import hashlib
import signal
import sys
import time
from collections import OrderedDict
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable

import numpy as np

from . import __version__
from .config import RunConfig
from .contracts import Plugin, load_plugin
from .errors import InputError, ItemFailure, MetricUnavailable
from .outputs import as_waveform, audio_sha, save_audio
from .schedules import NoiseSchedule, ScheduleSpec
from .store import ITEMS, MANIFEST, TIMING, FORMAT, Journal, RunLock, dumps, read_jsonl, write_atomic, write_tables
from .testset import TestSet, Utterance, load_audio, load_features, load_testset
from .timing import hardware, thread_limit, time_call


@dataclass(frozen=True)
class GridPoint:
    """One configuration: a schedule built for ``steps``, driven by ``sampler``."""

    spec: ScheduleSpec
    schedule: NoiseSchedule
    sampler: str
    steps: int
    nfe: int

    @property
    def label(self) -> str:
        return f"{self.spec.name}/{self.sampler}/{self.steps}"

    def describe(self) -> dict[str, Any]:
        return {"schedule": self.spec.name, "kind": self.spec.kind, "sampler": self.sampler,
                "steps": self.steps, "nfe": self.nfe, **self.schedule.describe()}


@dataclass(frozen=True)
class Job:
    key: str
    utt: int
    point: int
    seed: int


@dataclass
class Setup:
    config: RunConfig
    plugin: Plugin
    testset: TestSet
    metrics: list[Any]
    policy: Any
    grid: list[GridPoint]
    out_dir: Path
    jobs: list[Job] = field(default_factory=list)

    def manifest(self) -> dict[str, Any]:
        cfg = self.config
        cols = {c.name: {"metric": m.name, "unit": c.unit, "higher_is_better": c.higher_is_better,
                         "range": list(c.valid_range), "description": c.description}
                for m in self.metrics for c in m.columns}
        timed = [u.id for u in timing_utterances(self)]
        return {
            "format": FORMAT, "vocobench_version": __version__,
            "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "config_source": cfg.source, "config": cfg.raw,
            "vocoder": self.plugin.describe(), "frontend": self.plugin.frontend.to_dict(),
            "frontend_fingerprint": self.plugin.frontend.fingerprint(),
            "metrics": {m.name: m.variant(self.plugin.sample_rate) for m in self.metrics}, "columns": cols,
            "length_policy": self.policy.describe(), "dataset": self.testset.describe(),
            "grid": [g.describe() for g in self.grid], "seeds": cfg.seeds,
            "sampler_options": cfg.sampler_options,
            "timing": {"warmup": cfg.timing.warmup, "repeats": cfg.timing.repeats,
                       "utterances": timed, "threads": cfg.timing.threads},
            "save_audio": cfg.save_audio, "hardware": {**hardware(), **_plugin_hw(self.plugin)},
            "packages": package_versions(), "decide": cfg.decide,
            "job_keys": [j.key for j in self.jobs],
        }


def _plugin_hw(plugin: Plugin) -> dict[str, Any]:
    fn = getattr(plugin.obj, "describe", None)
    try:
        return {"plugin": fn()} if callable(fn) else {}
    except Exception:
        return {}


def package_versions() -> dict[str, str]:
    from importlib.metadata import PackageNotFoundError, version

    out = {}
    for name in ("vocobench", "numpy", "scipy", "librosa", "soundfile", "soxr", "pystoi", "pesq",
                 "pandas", "matplotlib", "torch"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            pass
    return out


def build_grid(cfg: RunConfig, plugin: Plugin) -> list[GridPoint]:
    samplers = cfg.samplers or plugin.samplers()
    offered = plugin.samplers()
    for s in samplers:
        if s not in offered:
            raise InputError(f"sampler not offered by this {plugin.kind}; valid: {', '.join(offered)}",
                             source=cfg.source, field="sweep.samplers", value=s)
    for name in cfg.sampler_options:
        if name not in samplers:
            raise InputError("options given for a sampler that is not swept", source=cfg.source,
                             field=f"sampler_options.{name}", value=name)
    grid = []
    for spec in cfg.schedules:
        steps = [spec.fixed_length] if spec.fixed_length else cfg.steps
        for n in steps:
            try:
                sched = spec.build(n, plugin.training_schedule)
            except InputError as e:
                raise InputError(str(e), source=cfg.source) from None
            for s in samplers:
                grid.append(GridPoint(spec, sched, s, n, plugin.nfe(sched, s)))
    return grid


def job_key(shared: str, point: str, utt: Utterance, seed: int) -> str:
    """Cache key: everything that changes a result (``shared``: vocoder, version, front-end,
    metric variants, length policy; ``point``: schedule, sampler and its options), seed, content."""
    h = hashlib.sha256(shared.encode())
    h.update(point.encode())
    h.update(f"\0{seed}\0{utt.sha256}".encode())
    return h.hexdigest()[:24]


def prepare(cfg: RunConfig, out_dir: str | Path | None = None, testset: TestSet | None = None) -> Setup:
    """Validate everything and build the job list; writes nothing."""
    from .metrics import DEFAULT_METRICS, LengthPolicy, build_metrics

    try:
        plugin = load_plugin(cfg.target, cfg.options, cfg.search_path)
    except InputError as e:
        if e.source:
            raise
        raise InputError(str(e), source=cfg.source) from None
    if cfg.version:
        plugin.version = cfg.version
    if cfg.version_file:
        digest = hashlib.sha256(cfg.version_file.read_bytes()).hexdigest()[:16]
        plugin.version = f"{plugin.version or ''}+sha256:{digest}"
    if plugin.frontend.sample_rate != plugin.sample_rate:
        raise InputError("front-end sample rate differs from the vocoder's sample rate",
                         source=cfg.target, field="frontend.sample_rate",
                         value=(plugin.frontend.sample_rate, plugin.sample_rate))
    ts = testset or load_testset(cfg.testset)
    metrics = build_metrics(list(cfg.metrics or DEFAULT_METRICS), cfg.metric_options, source=cfg.source)
    policy = LengthPolicy(mode=cfg.length_mode, tolerance_hops=cfg.length_tolerance_hops)
    grid = build_grid(cfg, plugin)
    _check_decide(cfg, metrics)
    out = Path(out_dir) if out_dir else (cfg.output_dir or Path("reports") / "run")
    setup = Setup(cfg, plugin, ts, metrics, policy, grid, out)
    ids = {"vocoder": plugin.describe(), "version": __version__,
           "metrics": {m.name: m.variant(plugin.sample_rate) for m in metrics},
           "length": policy.describe()}
    shared = dumps(ids)
    points = [dumps({"schedule": p.describe(), "options": cfg.sampler_options.get(p.sampler, {})})
              for p in grid]
    for ui, u in enumerate(ts.utterances):
        for pi in range(len(grid)):
            for seed in cfg.seeds:
                setup.jobs.append(Job(job_key(shared, points[pi], u, seed), ui, pi, seed))
    return setup


def _check_decide(cfg: RunConfig, metrics: list[Any]) -> None:
    """Validate ``[decide]`` now, so a typo there cannot surface only after a long sweep."""
    try:
        from .report.options import ReportOptions
    except ImportError:
        return
    opts = ReportOptions.from_mapping(cfg.decide, source=cfg.source)
    columns = {c.name for m in metrics for c in m.columns if isinstance(c.higher_is_better, bool)}
    named = [*(opts.metrics or ()), *opts.margins, *([opts.primary] if opts.primary else [])]
    for name in named:
        if name not in columns:
            raise InputError(f"not a metric column of this run; valid: {', '.join(sorted(columns))}",
                             source=cfg.source, field="decide", value=name)


def item_rng(seed: int, utt: Utterance) -> np.random.Generator:
    """Per-item generator: same seed and same utterance content ⇒ same noise."""
    return np.random.default_rng([seed, int(utt.sha256[:8], 16)])


class Worker:
    """Synthesises and scores jobs; caches per-utterance work (reference audio, analysis)."""

    def __init__(self, setup: Setup, cache_size: int = 2) -> None:
        self.s = setup
        self._synth: dict[int, Callable] = {}
        self._utt: OrderedDict[int, dict[str, Any]] = OrderedDict()
        self._cache_size = cache_size

    def utterance(self, i: int) -> dict[str, Any]:
        """Reference audio and features of utterance ``i`` (LRU-cached); metric states are added
        by :meth:`states` on first use, so the timing phase never computes them."""
        if i in self._utt:
            self._utt.move_to_end(i)
            return self._utt[i]
        u = self.s.testset.utterances[i]
        sr = self.s.plugin.sample_rate
        ref = load_audio(u, sr)
        feats = load_features(u)
        if feats is None:
            feats = self.s.plugin.frontend(ref)
        elif feats.shape[0] != self.s.plugin.frontend.n_mels:
            raise InputError("features have the wrong number of mel bands", source=str(u.features_path),
                             field="n_mels", value=feats.shape[0])
        entry = {"ref": ref, "feats": feats}
        self._utt[i] = entry
        while len(self._utt) > self._cache_size:
            self._utt.popitem(last=False)
        return entry

    def states(self, i: int) -> dict[str, Any]:
        """Reference-side analysis of every metric for utterance ``i`` (cached with the audio)."""
        entry = self.utterance(i)
        if "states" not in entry:
            sr = self.s.plugin.sample_rate
            entry["states"] = {m.name: m.prepare(entry["ref"], sr) for m in self.s.metrics}
        return entry["states"]

    def synth(self, p: int) -> Callable:
        if p not in self._synth:
            g = self.s.grid[p]
            self._synth[p] = self.s.plugin.synthesizer(g.sampler, self.s.config.sampler_options.get(g.sampler))
        return self._synth[p]

    def synthesize(self, job: Job) -> tuple[np.ndarray, float]:
        g, u = self.s.grid[job.point], self.s.testset.utterances[job.utt]
        feats = self.utterance(job.utt)["feats"]
        fn = self.synth(job.point)
        rng = item_rng(job.seed, u)
        self.s.plugin.synchronize()
        t0 = time.perf_counter()
        with _deadline(self.s.config.item_timeout_s):
            out = fn(feats, g.schedule, rng)
        self.s.plugin.synchronize()
        return out, time.perf_counter() - t0

    def process(self, job: Job) -> dict[str, Any]:
        g, u = self.s.grid[job.point], self.s.testset.utterances[job.utt]
        rec: dict[str, Any] = {"key": job.key, "utt_id": u.id, "utt_sha": u.sha256[:16], "tags": u.tags,
                               "schedule": g.spec.name, "sampler": g.sampler, "steps": g.steps,
                               "nfe": g.nfe, "seed": job.seed, "duration_s": u.duration_s,
                               "status": "ok", "failure": None, "metrics": {}, "notes": {},
                               "synth_s": None, "rtf": None, "ms_per_nfe": None, "audio_sha": None,
                               "audio_path": None, "length_diff": None}
        try:
            entry = self.utterance(job.utt)
            try:
                out, secs = self.synthesize(job)
            except ItemFailure:
                raise
            except Exception as e:
                raise ItemFailure(f"vocoder raised {type(e).__name__}: {e}") from None
            y = as_waveform(out)
            rec.update(synth_s=secs, rtf=secs / u.duration_s, ms_per_nfe=1e3 * secs / max(g.nfe, 1),
                       audio_sha=audio_sha(y))
            ref, est, info = self.s.policy.apply(entry["ref"], y, self.s.plugin.frontend.hop_length)
            rec["length_diff"] = info.get("length_diff")
            if self._save(job):
                rel = Path("audio") / _safe(u.id) / f"{_safe(g.spec.name)}__{g.sampler}__{g.steps}__s{job.seed}.flac"
                save_audio(self.s.out_dir / rel, y, self.s.plugin.sample_rate)
                rec["audio_path"] = str(rel)
            self._score(rec, self.states(job.utt), est)
        except ItemFailure as e:
            rec.update(status="failed", failure=str(e))
        return rec

    def _score(self, rec: dict[str, Any], states: dict[str, Any], est: np.ndarray) -> None:
        sr = self.s.plugin.sample_rate
        for m in self.s.metrics:
            try:
                vals = m.score(states[m.name], est, sr)
                rec["metrics"].update({c.name: float(vals[c.name]) for c in m.columns})
            except MetricUnavailable as e:
                for c in m.columns:
                    rec["metrics"][c.name] = float("nan")
                    rec["notes"][c.name] = str(e)
            except Exception as e:       # a metric bug must not end the sweep
                for c in m.columns:
                    rec["metrics"][c.name] = float("nan")
                    rec["notes"][c.name] = f"metric error {type(e).__name__}: {e}"

    def _save(self, job: Job) -> bool:
        mode = self.s.config.save_audio
        return mode == "all" or (mode == "first-seed" and job.seed == self.s.config.seeds[0])


def _safe(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)


class _deadline:
    """Raise :class:`ItemFailure` if the body runs past ``seconds`` (SIGALRM; main thread only)."""

    def __init__(self, seconds: float | None) -> None:
        self.seconds = seconds
        import threading

        self.active = bool(seconds) and threading.current_thread() is threading.main_thread() \
            and hasattr(signal, "setitimer")

    def __enter__(self) -> None:
        if self.active:
            def on_alarm(signum: int, frame: Any) -> None:
                raise ItemFailure(f"vocoder call exceeded the {self.seconds:g} s timeout")

            self._old = signal.signal(signal.SIGALRM, on_alarm)
            signal.setitimer(signal.ITIMER_REAL, float(self.seconds))  # type: ignore[arg-type]

    def __exit__(self, *exc: object) -> None:
        if self.active:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, self._old)


def timing_utterances(setup: Setup) -> list[Utterance]:
    n = setup.config.timing.utterances
    utts = setup.testset.utterances
    return list(utts if n == 0 else utts[:n])


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
                with _deadline(cfg.item_timeout_s and cfg.item_timeout_s * calls):
                    t = time_call(lambda: fn(feats, g.schedule, item_rng(job.seed, u)),
                                  warmup=cfg.timing.warmup, repeats=cfg.timing.repeats,
                                  sync=setup.plugin.synchronize)
            except Exception as e:
                progress(f"timing failed for {g.label} on {u.id}: {type(e).__name__}: {e}")
                continue
            base = {"key": job.key, "schedule": g.spec.name, "sampler": g.sampler, "steps": g.steps,
                    "nfe": g.nfe, "utt_id": u.id, "duration_s": u.duration_s,
                    "peak_mem_bytes": _peak_memory(setup.plugin)}
            for rep, secs in [(-1, t.first_s)] + list(enumerate(t.seconds)):
                journal.append({**base, "repeat": rep, "seconds": secs, "rtf": secs / u.duration_s,
                                "ms_per_nfe": 1e3 * secs / max(g.nfe, 1)})
            progress(f"timed {g.label} on {u.id}")


def _peak_memory(plugin: Plugin) -> int | None:
    fn = getattr(plugin.obj, "peak_memory_bytes", None)
    try:
        peak = fn() if callable(fn) else None
        return None if peak is None else int(peak)
    except Exception:
        return None


class Progress:
    """One self-overwriting stderr line with count, percentage and ETA."""

    def __init__(self, total: int, enabled: bool = True, label: str = "sweep") -> None:
        self.total, self.done, self.enabled, self.label = total, 0, enabled, label
        self.t0 = time.perf_counter()
        self.tty = sys.stderr.isatty()

    def step(self, what: str = "") -> None:
        self.done += 1
        if not self.enabled:
            return
        el = time.perf_counter() - self.t0
        eta = el / self.done * (self.total - self.done)
        line = (f"{self.label} [{self.done:>5}/{self.total}] {100 * self.done / max(self.total, 1):5.1f}% "
                f"elapsed {_hms(el)} eta {_hms(eta)} {what[:40]}")
        if self.tty:
            sys.stderr.write("\r" + line.ljust(100) + ("\n" if self.done == self.total else ""))
        elif self.done == self.total or self.done % max(1, self.total // 10) == 0:
            sys.stderr.write(line + "\n")
        sys.stderr.flush()


def _hms(s: float) -> str:
    s = int(s)
    return f"{s // 3600}:{s // 60 % 60:02d}:{s % 60:02d}"


def run(cfg: RunConfig, out_dir: str | Path | None = None, *, progress: bool = True,
        report: bool = True, workers: int | None = None, scheduler: str | None = None) -> Path:
    """Run (or resume) a sweep; returns the run directory."""
    n_workers = cfg.workers if workers is None else workers
    if isinstance(n_workers, bool) or not isinstance(n_workers, int) or n_workers < 1:
        raise InputError("must be a positive integer", field="workers", value=n_workers)
    setup = prepare(cfg, out_dir)
    out = setup.out_dir
    with RunLock(out):
        write_atomic(out / MANIFEST, dumps(setup.manifest()) + "\n")
        journal = Journal(out / ITEMS)
        status = {r.get("key"): r.get("status") for r in read_jsonl(out / ITEMS)}
        todo = [j for j in setup.jobs if j.key not in status]
        _say(progress, f"{len(setup.jobs)} items ({len(setup.jobs) - len(todo)} already done), "
                       f"{len(setup.grid)} configurations, {len(setup.testset.utterances)} utterances")
        bar = Progress(len(todo), progress)
        status.update(run_jobs(setup, todo, journal, bar, n_workers, scheduler or cfg.scheduler))
        journal.close()
        tj = Journal(out / TIMING)
        tdone = {r.get("key") for r in read_jsonl(out / TIMING)}
        failed = {k for k, v in status.items() if v == "failed"}
        tjobs = [(j, u) for j, u in timing_plan(setup) if j.key not in tdone | failed]
        tbar = Progress(len(tjobs), progress, label="timing")
        run_timing(setup, tjobs, tj, lambda s: tbar.step(s) if s.startswith("timed") else _say(progress, s))
        tj.close()
        changed = bool(todo or tjobs) or not (out / "summary.md").exists()
        stored = write_tables(out)
        if report and changed:
            render(stored, echo=progress)
        elif report:
            _say(progress, "nothing new to compute; reports are up to date "
                           f"(re-render with: vocobench report {out})")
    return out


def run_jobs(setup: Setup, jobs: list[Job], journal: Journal, bar: Progress, workers: int,
             scheduler: str | None) -> dict[str, str]:
    """Quality sweep: serial in this process, or in ``workers`` local processes, or on the Dask
    cluster at ``scheduler`` (:mod:`vocobench.parallel`); each record is journalled on arrival.

    Every item is computed with one BLAS/OpenMP thread, serial or parallel: multi-threaded BLAS
    changes the last bits of results, and audio hashes and scores must not depend on the worker
    or core count. The timing phase uses ``[timing] threads``. Returns each new item's status.
    """
    status: dict[str, str] = {}

    def finished(rec: dict[str, Any]) -> None:
        journal.append(rec)
        status[rec["key"]] = rec["status"]
        bar.step(f"{rec['utt_id']} {rec['schedule']}/{rec['sampler']}/{rec['steps']}")

    if scheduler or workers != 1:
        from .parallel import run_parallel

        run_parallel(setup, jobs, finished, workers=workers, scheduler=scheduler)
        return status
    worker = Worker(setup)
    with thread_limit(1, setup.plugin.obj):
        for job in jobs:
            finished(worker.process(job))
    return status


def render(out: Any, echo: bool = True) -> Any:
    """Reports for a run directory or an already loaded :class:`~vocobench.store.Run`."""
    try:
        from .report import render_report
    except ImportError:          # decision stage not installed in this build
        return None
    return render_report(out, echo=echo)


def _say(enabled: bool, msg: str) -> None:
    if enabled:
        print(msg, file=sys.stderr)
