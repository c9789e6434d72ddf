"""TOML run configuration → a validated :class:`RunConfig`.

Every bad value raises :class:`~vocobench.errors.InputError` naming the config file, the field and
the value. Unknown keys are errors too (a typo must not silently fall back to a default).
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from .errors import InputError
from .schedules import ScheduleSpec, make_spec

SECTIONS = {
    "vocoder": {"target", "options", "version", "version_file", "search_path"},
    "testset": {"path"},
    "sweep": {"steps", "samplers", "seeds", "schedule"},
    "sampler_options": None,      # free-form: one table per sampler name
    "metrics": {"use", "options", "length_mode", "length_tolerance_hops"},
    "timing": {"warmup", "repeats", "utterances", "threads"},
    "output": {"dir", "save_audio"},
    "run": {"workers", "item_timeout_s", "scheduler"},
    "decide": None,               # read by the decision stage (report)
}
SAVE_AUDIO = ("first-seed", "all", "none")


@dataclass
class TimingConfig:
    warmup: int = 1
    repeats: int = 3
    utterances: int = 2           # timed on the first N utterances; 0 = all
    threads: int = 1


@dataclass
class RunConfig:
    target: str
    testset: Path
    schedules: list[ScheduleSpec]
    steps: list[int] = field(default_factory=lambda: [1, 2, 4, 8, 25])
    samplers: list[str] | None = None              # None: every sampler the plug-in offers
    seeds: list[int] = field(default_factory=lambda: [0])
    options: dict[str, Any] = field(default_factory=dict)
    version: str | None = None
    version_file: Path | None = None               # e.g. the checkpoint: its hash joins the cache keys
    search_path: list[Path] = field(default_factory=list)
    sampler_options: dict[str, dict[str, Any]] = field(default_factory=dict)
    metrics: list[str] | None = None               # None: the default metric set
    metric_options: dict[str, dict[str, Any]] = field(default_factory=dict)
    length_mode: str = "trim"
    length_tolerance_hops: float = 2.0
    timing: TimingConfig = field(default_factory=TimingConfig)
    output_dir: Path | None = None
    save_audio: str = "first-seed"
    workers: int = 1
    item_timeout_s: float | None = None
    scheduler: str | None = None
    decide: dict[str, Any] = field(default_factory=dict)
    source: str = "<config>"
    raw: dict[str, Any] = field(default_factory=dict)


def load_config(path: str | Path) -> RunConfig:
    path = Path(path)
    if not path.is_file():
        raise InputError("config file not found", source=str(path))
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"malformed TOML: {e}", source=str(path)) from None
    except UnicodeDecodeError:
        raise InputError("config is not UTF-8 text", source=str(path)) from None
    return parse_config(data, base_dir=path.parent, source=str(path))


def parse_config(data: Mapping[str, Any], base_dir: str | Path = ".", source: str = "<config>") -> RunConfig:
    base = Path(base_dir)

    def bad(fieldname: str, msg: str, value: Any = None) -> InputError:
        return InputError(msg, source=source, field=fieldname, value=value)

    for sec, val in data.items():
        if sec not in SECTIONS:
            raise bad(sec, f"unknown section; valid: {sorted(SECTIONS)}")
        if not isinstance(val, Mapping):
            raise bad(sec, "must be a table", val)
        keys = SECTIONS[sec]
        if keys is not None:
            unknown = sorted(set(val) - keys)
            if unknown:
                raise bad(f"{sec}.{unknown[0]}", f"unknown key; valid in [{sec}]: {sorted(keys)}")

    voc = data.get("vocoder", {})
    if "target" not in voc:
        raise bad("vocoder.target", "missing: name your vocoder as 'package.module:object'")
    target = voc["target"]
    if not isinstance(target, str) or ":" not in target:
        raise bad("vocoder.target", "must look like 'package.module:object'", target)
    if target.split(":")[0].endswith(".py"):
        target = str((base / target.split(":")[0]).resolve()) + ":" + target.rsplit(":", 1)[1]
    options = _table(voc.get("options", {}), "vocoder.options", bad)
    search = [base / p for p in (_list(voc["search_path"], "vocoder.search_path", str, bad)
                                 if "search_path" in voc else [])]
    search.insert(0, base)

    ts = data.get("testset", {})
    if "path" not in ts:
        raise bad("testset.path", "missing: a folder of wav/flac files or a CSV manifest")
    testset = base / _typed(ts["path"], "testset.path", str, bad)

    sw = data.get("sweep", {})
    steps = _list(sw.get("steps", [1, 2, 4, 8, 25]), "sweep.steps", int, bad)
    for s in steps:
        if s <= 0:
            raise bad("sweep.steps", "every step count must be a positive integer", s)
    if len(set(steps)) != len(steps):
        raise bad("sweep.steps", "step counts repeat", steps)
    samplers = (_list(sw["samplers"], "sweep.samplers", str, bad) if "samplers" in sw else None)
    seeds = _list(sw.get("seeds", [0]), "sweep.seeds", int, bad)
    if any(s < 0 for s in seeds) or len(set(seeds)) != len(seeds):
        raise bad("sweep.seeds", "seeds must be distinct non-negative integers", seeds)
    raw_sched = sw.get("schedule", [{"name": "uniform", "kind": "stride", "stride": "uniform"}])
    if not isinstance(raw_sched, list) or not raw_sched:
        raise bad("sweep.schedule", "must be a non-empty array of tables ([[sweep.schedule]])", raw_sched)
    schedules = []
    for i, d in enumerate(raw_sched):
        if not isinstance(d, Mapping):
            raise bad(f"sweep.schedule[{i}]", "must be a table", d)
        schedules.append(make_spec(d, source=source))
    names = [s.name for s in schedules]
    if len(set(names)) != len(names):
        raise bad("sweep.schedule.name", "schedule names repeat", names)

    sopts = {k: dict(_table(v, f"sampler_options.{k}", bad))
             for k, v in data.get("sampler_options", {}).items()}

    met = data.get("metrics", {})
    metrics = _list(met["use"], "metrics.use", str, bad) if "use" in met else None
    mopts = {k: dict(_table(v, f"metrics.options.{k}", bad))
             for k, v in _table(met.get("options", {}), "metrics.options", bad).items()}
    length_mode = met.get("length_mode", "trim")
    if length_mode not in ("trim", "pad"):
        raise bad("metrics.length_mode", "must be 'trim' or 'pad'", length_mode)
    tol = _number(met.get("length_tolerance_hops", 2.0), "metrics.length_tolerance_hops", bad, lo=0)

    tm = data.get("timing", {})
    timing = TimingConfig(
        warmup=int(_number(tm.get("warmup", 1), "timing.warmup", bad, lo=0, integer=True)),
        repeats=int(_number(tm.get("repeats", 3), "timing.repeats", bad, lo=1, integer=True)),
        utterances=int(_number(tm.get("utterances", 2), "timing.utterances", bad, lo=0, integer=True)),
        threads=int(_number(tm.get("threads", 1), "timing.threads", bad, lo=1, integer=True)))

    out = data.get("output", {})
    out_dir = base / _typed(out["dir"], "output.dir", str, bad) if "dir" in out else None
    save = out.get("save_audio", "first-seed")
    if save not in SAVE_AUDIO:
        raise bad("output.save_audio", f"must be one of {SAVE_AUDIO}", save)

    rn = data.get("run", {})
    workers = int(_number(rn.get("workers", 1), "run.workers", bad, lo=1, integer=True))
    timeout = rn.get("item_timeout_s")
    if timeout is not None:
        timeout = _number(timeout, "run.item_timeout_s", bad, lo=0, strict=True)
    scheduler = rn.get("scheduler")
    if scheduler is not None:
        scheduler = _typed(scheduler, "run.scheduler", str, bad)

    return RunConfig(target=target, testset=testset, schedules=schedules, steps=steps,
                     samplers=samplers, seeds=seeds, options=dict(options),
                     version=_opt_str(voc.get("version"), "vocoder.version", bad),
                     version_file=_file(voc.get("version_file"), "vocoder.version_file", base, bad),
                     search_path=search, sampler_options=sopts, metrics=metrics,
                     metric_options=mopts, length_mode=length_mode, length_tolerance_hops=tol,
                     timing=timing, output_dir=out_dir, save_audio=save, workers=workers,
                     item_timeout_s=timeout, scheduler=scheduler,
                     decide=dict(data.get("decide", {})), source=source, raw=dict(data))


def _typed(v: Any, name: str, typ: type, bad) -> Any:
    if isinstance(v, bool) or not isinstance(v, typ):
        raise bad(name, f"must be {'an integer' if typ is int else 'a string' if typ is str else typ.__name__}", v)
    return v


def _list(v: Any, name: str, typ: type, bad) -> list:
    if not isinstance(v, list) or not v:
        raise bad(name, "must be a non-empty list", v)
    return [_typed(x, name, typ, bad) for x in v]


def _table(v: Any, name: str, bad) -> Mapping[str, Any]:
    if not isinstance(v, Mapping):
        raise bad(name, "must be a table", v)
    return v


def _file(v: Any, name: str, base: Path, bad) -> Path | None:
    if v is None:
        return None
    p = base / _typed(v, name, str, bad)
    if not p.is_file():
        raise bad(name, "file not found", str(p))
    return p


def _opt_str(v: Any, name: str, bad) -> str | None:
    return None if v is None else _typed(v, name, str, bad)


def _number(v: Any, name: str, bad, lo: float | None = None, integer: bool = False,
            strict: bool = False) -> float:
    ok = isinstance(v, int) if integer else isinstance(v, (int, float))
    if isinstance(v, bool) or not ok:
        raise bad(name, "must be an integer" if integer else "must be a number", v)
    if not math.isfinite(v):
        raise bad(name, "must be finite", v)
    if lo is not None and (v <= lo if strict else v < lo):
        raise bad(name, f"must be {'>' if strict else '≥'} {lo}", v)
    return v
