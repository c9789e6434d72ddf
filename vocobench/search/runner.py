"""`vocobench search`: per step count and sampler, search schedules on the search split, then
confirm the finalists on the held-out split against the reference.

The reference (default: the denoiser's full training schedule, its own ``T`` steps) is also run
on the search split with the search seeds, for the constrained objective and for the optimistic
figures; its held-out run uses the fresh seeds, as the finalists' do.
"""
from __future__ import annotations

import dataclasses
import sys
from pathlib import Path
from typing import Any

import numpy as np

from ..config import RunConfig
from ..errors import InputError
from ..keys import directed_columns
from ..samplers import steps_within
from ..schedules import ScheduleSpec, geometric, make_spec
from ..bootstrap import BootstrapSettings
from ..store import ITEMS, Journal, RunLock, read_jsonl
from ..sweep import prepare, process_cap
from .engine import BudgetSpent, Evaluator
from .holdout import compare, overall
from .objective import Objective, pareto_front, utterance_means
from .options import SearchOptions
from .spaces import make_space
from .split import split_utterances
from .strategies import STRATEGIES


def search(cfg: RunConfig, out_dir: str | Path | None = None, *, progress: bool = True,
           workers: int | None = None, scheduler: str | None = None, plots: bool = True) -> Path:
    """Run (or resume) the search of ``cfg``'s ``[search]`` table; returns the output folder."""
    from ..report.options import ReportOptions
    from .outputs import write_outputs

    opts = SearchOptions.from_mapping(getattr(cfg, "search", None), cfg.source)
    decide = ReportOptions.from_mapping(cfg.decide, source=cfg.source)
    probe = ScheduleSpec("probe", "explicit", {"betas": [0.5]})   # the [sweep] grid is not searched
    base = prepare(dataclasses.replace(cfg, schedules=[probe], steps=[1], nfe=None), out_dir)
    out, plugin, ts = base.out_dir, base.plugin, base.testset
    cols = [c for m in base.metrics for c in m.columns]
    named = set(directed_columns(cols))
    higher = {c.name: bool(c.higher_is_better) for c in cols if c.name in named}
    primary = opts.primary or decide.primary or (opts.metrics or decide.metrics or list(higher))[0]
    metrics = list(opts.metrics or decide.metrics or [primary])
    for col in [primary, *metrics, *opts.margins]:
        if col not in higher:
            raise InputError(f"not a metric column of this config; valid: {', '.join(higher)}",
                             source=cfg.source, field="search.primary", value=col)
    if opts.objective == "constrained" and not opts.margins:
        raise InputError("a constrained objective needs margins", source=cfg.source,
                         field="search.margins", value={})
    ref_spec, ref_steps = _reference(opts, plugin, cfg.source)
    samplers = opts.samplers or cfg.samplers or plugin.samplers()
    split = split_utterances(ts.utterances, opts.holdout_fraction, opts.stratify, opts.split_seed)
    settings = decide.settings
    n_workers = workers or cfg.workers
    if n_workers == "auto":
        n_workers = 1 if scheduler or cfg.scheduler else process_cap(base).value
    targets = []
    with RunLock(out):
        journal = Journal(out / ITEMS)
        done = {r["key"]: r for r in read_jsonl(out / ITEMS) if "key" in r}
        before = len(done)
        for sampler in samplers:
            for steps, budget in _step_counts(opts, plugin, sampler):
                say(progress, f"search: {steps} steps, sampler {sampler}, strategy {opts.strategy}, "
                              f"{len(split.search)} search / {len(split.held_out)} held-out utterances")
                obj = Objective(opts.objective, primary, metrics, higher, dict(opts.margins))
                ev = Evaluator(cfg, out, ts, journal, done, steps=steps, sampler=sampler,
                               seeds=opts.seeds, search=split.search, objective=obj,
                               max_syntheses=opts.max_syntheses, max_seconds=opts.max_seconds,
                               workers=n_workers, scheduler=scheduler or cfg.scheduler,
                               progress=progress, identity=base.identity)
                ref_search = ev.records([ref_spec], ref_steps, split.search, opts.seeds,
                                        budget=False)[ref_spec.name]
                obj.reference = {c: float(utterance_means(ref_search, c).mean()) for c in obj.columns}
                stopped = _run_spaces(opts, ev, steps, plugin.training_schedule, cfg.source)
                targets.append(_confirm(opts, ev, obj, ref_spec, ref_steps, split, decide,
                                        settings, stopped, steps, sampler)
                               | {"nfe": plugin.nfe(geometric(steps), sampler), "nfe_budget": budget})
        journal.close()
    summary = {"options": opts.describe(), "split": split.describe(), "primary": primary,
               "metrics": metrics, "reference": {"spec": {"name": ref_spec.name,
                                                          "kind": ref_spec.kind,
                                                          **dict(ref_spec.options)},
                                                 "steps": ref_steps},
               "bootstrap": settings.describe(), "targets": targets,
               "syntheses_computed_now": len(done) - before}
    write_outputs(out, summary, plugin.training_schedule, plots=plots)
    say(progress, f"search results in {out / 'search'}")
    return out


def say(enabled: bool, msg: str) -> None:
    if enabled:
        print(msg, file=sys.stderr)


def _step_counts(opts: SearchOptions, plugin: Any, sampler: str) -> list[tuple[int, int | None]]:
    """(steps, NFE budget) targets: the given step counts, or per budget the most steps of
    ``sampler`` whose network evaluations fit in it (as the sweep's ``nfe`` does)."""
    if not opts.nfe:
        return [(n, None) for n in opts.steps]
    out: dict[int, int] = {}
    for b in opts.nfe:
        out.setdefault(steps_within(lambda k: plugin.nfe(geometric(k), sampler), b), b)
    return [(n, b) for n, b in out.items()]


def _reference(opts: SearchOptions, plugin: Any, source: str) -> tuple[ScheduleSpec, int]:
    if opts.reference:
        table = dict(opts.reference)
        steps = table.pop("steps", None)
        spec = make_spec(table, source)
        steps = spec.fixed_length or steps
        if not isinstance(steps, int) or isinstance(steps, bool) or steps < 1:
            raise InputError("the reference needs `steps` (a positive integer)", source=source,
                             field="search.reference.steps", value=steps)
        return spec, steps
    if plugin.training_schedule is None:
        raise InputError("set [search] reference: this plug-in has no training schedule",
                         source=source, field="search.reference")
    return ScheduleSpec("training", "stride", {"stride": "uniform"}), len(plugin.training_schedule)


def _run_spaces(opts: SearchOptions, ev: Evaluator, steps: int, training: Any, source: str) -> str | None:
    rng = np.random.default_rng([opts.seed, steps])
    for table in opts.spaces:
        space = make_space(table, steps, training, source)
        try:
            STRATEGIES[opts.strategy](space, ev, opts, rng)
        except BudgetSpent:
            return "budget spent"
    return None


def _confirm(opts: SearchOptions, ev: Evaluator, obj: Objective, ref_spec: ScheduleSpec,
             ref_steps: int, split: Any, decide: Any, settings: BootstrapSettings,
             stopped: str | None, steps: int, sampler: str) -> dict[str, Any]:
    done = ev.complete()
    if opts.objective == "pareto":
        front = pareto_front([h["means"] for h in done], obj)
        finalists = [done[i] for i in front][:max(opts.finalists, 1) * 3]
    else:
        finalists = [h for h in done if np.isfinite(h["value"])][:opts.finalists]
    fresh = opts.fresh_seeds()
    specs = [ScheduleSpec(h["candidate"].name, "explicit", {"betas": h["candidate"].betas})
             for h in finalists]
    held = ev.records(specs, steps, split.held_out, fresh, budget=False) if specs else {}
    ref_held = ev.records([ref_spec], ref_steps, split.held_out, fresh, budget=False)[ref_spec.name]
    margins = {c: float(opts.margins[c]) if c in opts.margins else
               decide.margin_for(c, float(utterance_means(ref_held, c).mean()))[0]
               for c in obj.columns}
    result = compare(ref_held, held, obj, margins, settings) if held else {}
    rows = []
    for h in finalists:
        c = h["candidate"]
        rows.append({"name": c.name, "space": c.space, "params": dict(c.params), "betas": c.betas,
                     "optimistic_search_split": h["means"],
                     "held_out": result.get(c.name, {}), "overall": overall(result.get(c.name, {}))})
    return {"steps": steps, "sampler": sampler, "stopped": stopped, "budget": ev.describe(),
            "reference_search_split": obj.reference, "finalists": rows, "trace": ev.trace,
            "evaluated": [{"name": h["candidate"].name, "space": h["candidate"].space,
                           "utterances": h["n"], "value": h["value"] if np.isfinite(h["value"]) else None}
                          for h in ev.history.values()]}
