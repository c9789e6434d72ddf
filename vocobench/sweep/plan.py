"""The plan of a sweep: grid points, jobs and their cache keys, validated before anything is written.

Jobs are utterance × schedule × sampler × steps × seed. :func:`prepare` validates everything
(config, plug-in, test set, metrics, grid, ``[decide]``) and builds the job list; it writes nothing.
"""
from __future__ import annotations

import functools
import hashlib
import inspect
import sys
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from .. import __version__
from ..config import RunConfig
from ..contracts import Plugin, instantiate, resolve
from ..errors import InputError
from ..fingerprint import code_fingerprint, file_digest, option_files_fingerprint
from ..keys import config_label, directed_columns
from ..samplers import SAMPLER_OPTIONS, SAMPLERS, check_law, steps_within
from ..schedules import NoiseSchedule, ScheduleSpec
from ..store import FORMAT, dumps
from ..testset import TestSet, Utterance, load_testset
from ..timing import hardware


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
        return config_label(self.spec.name, self.sampler, self.steps)

    def describe(self) -> dict[str, Any]:
        return {"schedule": self.spec.name, "kind": self.spec.kind, "sampler": self.sampler,
                "steps": self.steps, "nfe": self.nfe, **self.schedule.describe()}


@dataclass(frozen=True)
class Job:
    """One item: utterance index ``utt``, grid index ``point``, ``seed``; ``key`` caches it."""

    key: str
    utt: int
    point: int
    seed: int


@dataclass(frozen=True)
class Identity:
    """What the vocoder's results are keyed by besides its description: a ``fingerprint`` of its
    code and option files (or of the config's ``version``, which overrides the code), and in
    words what it covers (``basis``)."""

    fingerprint: str
    basis: str


@dataclass
class Setup:
    """A validated run: config, loaded plug-in, test set, metrics, length policy, grid and jobs."""

    config: RunConfig
    plugin: Plugin
    testset: TestSet
    metrics: list[Any]
    policy: Any
    grid: list[GridPoint]
    out_dir: Path
    identity: Identity
    jobs: list[Job] = field(default_factory=list)

    def manifest(self) -> dict[str, Any]:
        """The run's ``manifest.json``: everything needed to reproduce and read it."""
        cfg = self.config
        cols = {c.name: {"metric": m.name, "unit": c.unit, "higher_is_better": c.higher_is_better,
                         "range": list(c.valid_range), "description": c.description}
                for m in self.metrics for c in m.columns}
        timed = [u.id for u in timing_utterances(self)]
        return {
            "format": FORMAT, "vocobench_version": __version__,
            "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "config_source": cfg.source, "config": cfg.raw,
            "vocoder": {**self.plugin.describe(), "fingerprint": self.identity.fingerprint,
                        "fingerprint_basis": self.identity.basis},
            "frontend": self.plugin.frontend.to_dict(),
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
    """Installed versions of vocobench and the packages that can change its results."""
    return dict(_package_versions())


@functools.lru_cache(maxsize=1)
def _package_versions() -> tuple[tuple[str, str], ...]:
    """Looked up once per process (importlib.metadata parses each package's metadata on every
    call, ~6 ms for these); installed versions do not change under a running sweep."""
    from importlib.metadata import PackageNotFoundError, version

    out = []
    for name in ("vocobench", "numpy", "scipy", "librosa", "soundfile", "soxr", "pystoi", "pesq",
                 "pandas", "matplotlib", "torch"):
        try:
            out.append((name, version(name)))
        except PackageNotFoundError:
            pass
    return tuple(out)


def timing_utterances(setup: Setup) -> list[Utterance]:
    """The utterances of the timing phase: the first ``[timing] utterances`` (0: all)."""
    n = setup.config.timing.utterances
    utts = setup.testset.utterances
    return list(utts if n == 0 else utts[:n])


def build_grid(cfg: RunConfig, plugin: Plugin) -> list[GridPoint]:
    """Every (schedule, steps, sampler) of the config that the plug-in offers, in config order."""
    samplers = cfg.samplers or plugin.samplers()
    offered = plugin.samplers()
    for s in samplers:
        if plugin.kind == "denoiser" and s in SAMPLERS:
            check_law(s, plugin.noise_law, cfg.source)     # a clear error for a mismatched law
        if s not in offered:
            raise InputError(f"sampler not offered by this {plugin.kind}; valid: {', '.join(offered)}",
                             source=cfg.source, field="sweep.samplers", value=s)
    for name in cfg.sampler_options:
        if name not in samplers:
            raise InputError("options given for a sampler that is not swept", source=cfg.source,
                             field=f"sampler_options.{name}", value=name)
        _check_sampler_options(cfg, plugin, name)
    grid: list[GridPoint] = []

    def build(spec: ScheduleSpec, n: int) -> NoiseSchedule:
        try:
            return spec.build(n, plugin.training_schedule)
        except InputError as e:
            raise InputError(str(e), source=cfg.source) from None

    for spec in cfg.schedules:
        if cfg.nfe and not spec.fixed_length:      # by cost: per sampler, the most steps in budget
            for budget in cfg.nfe:
                for s in samplers:
                    n = steps_within(lambda k: plugin.nfe(build(spec, k), s), budget)
                    if not any((g.spec, g.sampler, g.steps) == (spec, s, n) for g in grid):
                        sched = build(spec, n)
                        grid.append(GridPoint(spec, sched, s, n, plugin.nfe(sched, s)))
            continue
        steps = [spec.fixed_length] if spec.fixed_length else cfg.steps
        for n in steps:
            sched = build(spec, n)
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


def _check_sampler_options(cfg: RunConfig, plugin: Plugin, name: str) -> None:
    """``[sampler_options.NAME]`` checked now (names, types, ranges), not item by item later."""
    opts = cfg.sampler_options[name]
    if plugin.kind == "denoiser":
        SAMPLER_OPTIONS[name].parse(opts, cfg.source)
        return
    if not getattr(plugin.obj, "samplers", None):
        raise InputError("this vocoder declares no samplers, so it takes no sampler options",
                         source=cfg.source, field=f"sampler_options.{name}", value=sorted(opts))
    try:
        sig = inspect.signature(plugin.obj)
    except (TypeError, ValueError):
        return
    try:
        sig.bind(None, None, None, sampler=name, **opts)
    except TypeError as e:
        raise InputError(f"the vocoder's call does not take these options: {e}", source=cfg.source,
                         field=f"sampler_options.{name}", value=sorted(opts)) from None


def _code_of(obj: Any) -> tuple[str, str] | None:
    """(fingerprint, words) of the code behind ``obj``: its module and, inside a package, the
    package's modules (see :func:`vocobench.fingerprint.code_fingerprint`); None without source."""
    try:
        fp = code_fingerprint(obj)
    except InputError:                  # a built-in, or an object made without a source file
        return None
    owner = obj if inspect.ismodule(obj) or inspect.isclass(obj) or inspect.isroutine(obj) else type(obj)
    module = inspect.getmodule(owner)
    top = sys.modules.get((getattr(module, "__name__", "") or "").split(".")[0])
    if str(getattr(top, "__file__", "")).endswith("__init__.py"):
        return fp, f"code of package {top.__name__}"            # type: ignore[union-attr]
    return fp, f"code of module {Path(str(getattr(module, '__file__', '?'))).name}"


def vocoder_identity(cfg: RunConfig, plugin: Plugin, target: Any) -> Identity:
    """The fingerprint that joins every job key: the config's ``version`` if given (it overrides
    the code), else the source of the target's module and package, of the vocoder object's
    module and package if they differ, and the content of every option value naming a file."""
    if cfg.version:
        fp = hashlib.sha256(f"version\0{plugin.version}".encode()).hexdigest()[:16]
        return Identity(fp, f"version {cfg.version!r} from the config (code not hashed)")
    parts: list[str] = []
    said: list[str] = []
    seen: list[Any] = []
    for obj in (target, plugin.obj):
        # the module code_fingerprint hashes: a class and its instance share it, hash it once
        mod = obj if inspect.ismodule(obj) else getattr(obj, "__module__", None) or type(obj).__module__
        if mod in seen:
            continue
        seen.append(mod)
        code = _code_of(obj)
        if code and code[0] not in parts:
            parts.append(code[0])
            said.append(code[1])
    files = option_files_fingerprint(cfg.options)
    if files:
        parts.append(dumps(files))
        said.append("option file" + ("s " if len(files) > 1 else " ") + ", ".join(files))
    if plugin.version:
        parts.append(f"version\0{plugin.version}")
        said.append(f"version {plugin.version!r}")
    fp = hashlib.sha256("\n".join(parts).encode()).hexdigest()[:16]
    return Identity(fp, "; ".join(said) or "no source file found (built-in object)")


def load_target(cfg: RunConfig) -> tuple[Plugin, Any]:
    """The user's object loaded, constructed and wrapped, and the object the target names."""
    try:
        target = resolve(cfg.target, cfg.search_path)
        plugin = Plugin.wrap(instantiate(target, cfg.options, cfg.target), cfg.target, cfg.options)
    except InputError as e:
        if e.source:
            raise
        raise InputError(str(e), source=cfg.source) from None
    return plugin, target


def prepare(cfg: RunConfig, out_dir: str | Path | None = None, testset: TestSet | None = None,
            identity: Identity | None = None) -> Setup:
    """Validate everything and build the job list; writes nothing. ``identity``: the vocoder's
    fingerprint as the main process computed it (worker processes pass it on)."""
    from ..metrics import DEFAULT_METRICS, LengthPolicy, build_metrics

    plugin, target = load_target(cfg)
    if cfg.version:
        plugin.version = cfg.version
    if cfg.version_file:
        digest = file_digest(cfg.version_file)[:16]
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
    ident = identity or vocoder_identity(cfg, plugin, target)
    setup = Setup(cfg, plugin, ts, metrics, policy, grid, out, ident)
    ids = {"vocoder": plugin.describe(), "version": __version__, "fingerprint": ident.fingerprint,
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
        from ..report.options import ReportOptions
    except ImportError:
        return
    opts = ReportOptions.from_mapping(cfg.decide, source=cfg.source)
    columns = set(directed_columns(c for m in metrics for c in m.columns))
    named = [*(opts.metrics or ()), *opts.margins, *([opts.primary] if opts.primary else [])]
    for name in named:
        if name not in columns:
            raise InputError(f"not a metric column of this run; valid: {', '.join(sorted(columns))}",
                             source=cfg.source, field="decide", value=name)
