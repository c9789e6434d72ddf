"""TOML run configuration → a validated :class:`RunConfig`.

Every bad value raises :class:`~vocobench.errors.InputError` naming the config file, the field and
the value. Unknown keys are errors too (a typo must not silently fall back to a default). Each
section is declared once below as a :class:`~vocobench.params.Table` (keys, types, ranges,
defaults, descriptions); the tables drive parsing, the dataclass defaults and the generated
configuration reference in DEVELOPERS.md.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from .errors import InputError
from .metrics import DEFAULT_METRICS, LENGTH_PARAMS
from .params import (Boolean, Choice, Custom, Integer, ListOf, MapOf, OrAuto, Param, Real, String,
                     Table, read_toml, with_defaults)
from .schedules import ScheduleSpec, make_spec

SAVE_AUDIO = ("first-seed", "all", "none")
MAX_FAILED_SHARE = 0.5          # our choice: a sweep with most items failed is not to be trusted


def _target(v: Any) -> str:
    if not isinstance(v, str) or ":" not in v:
        raise ValueError("must look like 'package.module:object'")
    return v


VOCODER = Table("vocoder", [
    Param("target", Custom("'package.module:object'", _target, "string"), doc=(
        "the vocoder or denoiser as 'package.module:object' (a path ending in .py before ':' "
        "is read relative to the config file)")),
    Param("options", MapOf(), {}, "keyword arguments for the class or factory"),
    Param("version", String(), None,
          "version label; keys cached results instead of the hash of the vocoder's code"),
    Param("version_file", String(), None,
          "file (e.g. the checkpoint) whose hash joins the cache keys; relative to the config"),
    Param("search_path", ListOf(String(), nonempty=False), [],
          "folders put on the import path, relative to the config (its own folder comes first)"),
], doc="The plug-in under test.")
TESTSET = Table("testset", [
    Param("path", String(), doc=(
        "a folder of wav/flac files or a CSV manifest, relative to the config file")),
], doc="The utterances.")
SWEEP = Table("sweep", [
    Param("steps", ListOf(Integer(low=1), distinct=True), [1, 2, 4, 8, 25],
          "numbers of denoising steps (ignored by fixed-length schedules)"),
    Param("nfe", ListOf(Integer(low=1), distinct=True), None,
          "network-evaluation budgets instead of steps: each sampler gets the most steps that "
          "spend at most this many (Heun: 2N − 1); unset: sweep by steps"),
    Param("samplers", ListOf(String(nonempty=True)), None,
          "samplers to sweep; unset: every sampler the plug-in offers"),
    Param("seeds", ListOf(Integer(low=0), distinct=True), [0], "noise seeds per utterance"),
    Param("schedule", ListOf(MapOf(what="a table")),
          [{"name": "uniform", "kind": "stride", "stride": "uniform"}],
          "[[sweep.schedule]] tables: name, kind and the kind's options (see the schedule kinds)"),
], doc="The grid: schedule × sampler × steps, each run with every seed.")
METRICS = Table("metrics", [
    Param("use", ListOf(String(nonempty=True)), None,
          "metric names (`vocobench metrics`); unset: " + ", ".join(DEFAULT_METRICS)),
    Param("options", MapOf(MapOf(what="a table of option = value"),
                           "a table of metric = {option = value}"), {},
          "per-metric options (see the metric option tables)"),
    *LENGTH_PARAMS,
], doc="Scoring.")
TIMING = Table("timing", [
    Param("warmup", Integer(low=0), 1, "untimed calls before timing (the first is reported apart)"),
    Param("repeats", Integer(low=1), 3, "most timed calls per configuration and utterance (the "
          "sweep's own uncontended calls count)"),
    Param("rel_width", Real(low=0, keep_int=True), 0.05, "stop repeating once the median's 95 % "
          "interval is within ± this fraction of it (0: always all repeats)"),
    Param("utterances", Integer(low=0), 2, "timed on the first N utterances; 0 = all"),
    Param("threads", Integer(low=1), 1, "CPU thread limit while timing"),
    Param("reuse_sweep", Boolean(), True, "with one worker and one thread, keep the sweep's own "
          "uncontended calls as timing samples"),
], doc="The latency phase, run after the sweep, alone.")
OUTPUT = Table("output", [
    Param("dir", String(), None,
          "run directory, relative to the config; unset: given on the command line"),
    Param("save_audio", Choice(SAVE_AUDIO), SAVE_AUDIO[0], "which synthesised audio is kept"),
], doc="Where results go.")
RUN = Table("run", [
    Param("workers", OrAuto(Integer(low=1)), "auto", "parallel synthesis-and-scoring processes; "
          "auto: by cores, memory, device and estimated cost (the run says what it chose)"),
    Param("batch", OrAuto(Integer(low=1)), "auto", "most items of one utterance and configuration "
          "(its seeds) per vocoder call; auto: batched on an accelerator when the plug-in's items "
          "do not depend on their batch, one at a time on a CPU"),
    Param("item_timeout_s", Real(low=0, closed="neither", keep_int=True), None,
          "seconds before one item is failed; unset: no limit"),
    Param("scheduler", String(), None,
          "Dask scheduler address; unset: local processes"),
    Param("max_failed_share", Real(0, 1, keep_int=True), MAX_FAILED_SHARE,
          "the run exits non-zero when more than this share of its items failed (and always "
          "when every item failed)"),
], doc="Execution.")
CONFIG = Table("", [
    Param("vocoder", VOCODER, doc="the plug-in"),
    Param("testset", TESTSET, doc="the utterances"),
    Param("sweep", SWEEP, doc="the grid"),
    Param("sampler_options", MapOf(MapOf(what="a table of option = value"),
                                   "a table of sampler = {option = value}"), {},
          "per-sampler options (see the sampler option tables)"),
    Param("metrics", METRICS, doc="scoring"),
    Param("timing", TIMING, doc="latency phase"),
    Param("output", OUTPUT, doc="results"),
    Param("run", RUN, doc="execution"),
    Param("decide", MapOf(), {}, "options of the decision stage (see [decide])"),
    Param("search", MapOf(), {}, "options of `vocobench search` (see [search])"),
], title="Run config file (`vocobench run CONFIG`)", entry="section")
SECTIONS = tuple(CONFIG)


@dataclass
@with_defaults(TIMING)
class TimingConfig:
    warmup: int
    repeats: int
    utterances: int               # timed on the first N utterances; 0 = all
    threads: int
    rel_width: float = 0.05       # sequential stopping: median's 95 % interval within ± this
    reuse_sweep: bool = True      # one worker: the sweep's calls count as timing samples


@dataclass
class RunConfig:
    target: str
    testset: Path
    schedules: list[ScheduleSpec]
    steps: list[int] = SWEEP.field("steps")
    samplers: list[str] | None = None              # None: every sampler the plug-in offers
    nfe: list[int] | None = None                   # set: sweep by network evaluations, not steps
    seeds: list[int] = SWEEP.field("seeds")
    options: dict[str, Any] = VOCODER.field("options")
    version: str | None = None
    version_file: Path | None = None               # e.g. the checkpoint: its hash joins the cache keys
    search_path: list[Path] = VOCODER.field("search_path")
    sampler_options: dict[str, dict[str, Any]] = CONFIG.field("sampler_options")
    metrics: list[str] | None = None               # None: the default metric set
    metric_options: dict[str, dict[str, Any]] = METRICS.field("options")
    length_mode: str = METRICS.field("length_mode")
    length_tolerance_hops: float = METRICS.field("length_tolerance_hops")
    timing: TimingConfig = field(default_factory=TimingConfig)
    output_dir: Path | None = None
    save_audio: str = OUTPUT.field("save_audio")
    workers: int | str = RUN.field("workers")
    batch: int | str = RUN.field("batch")
    item_timeout_s: float | None = None
    scheduler: str | None = None
    max_failed_share: float = RUN.field("max_failed_share")
    decide: dict[str, Any] = CONFIG.field("decide")
    search: dict[str, Any] = CONFIG.field("search")
    source: str = "<config>"
    raw: dict[str, Any] = field(default_factory=dict)


def load_config(path: str | Path) -> RunConfig:
    path = Path(path)
    return parse_config(read_toml(path), base_dir=path.parent, source=str(path))


def parse_config(data: Mapping[str, Any], base_dir: str | Path = ".", source: str = "<config>") -> RunConfig:
    base = Path(base_dir)
    d = CONFIG.parse(data, source)
    voc, sw, met, out, rn = (d[k] for k in ("vocoder", "sweep", "metrics", "output", "run"))
    target = voc["target"]
    if target.split(":")[0].endswith(".py"):
        target = str((base / target.split(":")[0]).resolve()) + ":" + target.rsplit(":", 1)[1]
    schedules = [make_spec(s, source=source) for s in sw["schedule"]]
    if sw["nfe"] is not None and "steps" in data["sweep"]:
        raise InputError("give steps or nfe, not both", source=source, field="sweep.nfe",
                         value=sw["nfe"])
    names = [s.name for s in schedules]
    if len(set(names)) != len(names):
        raise InputError("schedule names repeat", source=source, field="sweep.schedule.name",
                         value=names)
    version_file = None
    if voc["version_file"] is not None:
        version_file = base / voc["version_file"]
        if not version_file.is_file():
            raise InputError("file not found", source=source, field="vocoder.version_file",
                             value=str(version_file))
    return RunConfig(target=target, testset=base / d["testset"]["path"], schedules=schedules,
                     steps=sw["steps"], samplers=sw["samplers"], nfe=sw["nfe"], seeds=sw["seeds"],
                     options=voc["options"], version=voc["version"], version_file=version_file,
                     search_path=[base, *(base / p for p in voc["search_path"])],
                     sampler_options=d["sampler_options"], metrics=met["use"],
                     metric_options=met["options"], length_mode=met["length_mode"],
                     length_tolerance_hops=met["length_tolerance_hops"],
                     timing=TimingConfig(**d["timing"]),
                     output_dir=None if out["dir"] is None else base / out["dir"],
                     save_audio=out["save_audio"], workers=rn["workers"], batch=rn["batch"],
                     item_timeout_s=rn["item_timeout_s"], scheduler=rn["scheduler"],
                     max_failed_share=rn["max_failed_share"],
                     decide=d["decide"], search=d["search"], source=source, raw=dict(data))
