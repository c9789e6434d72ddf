"""Sample-size planner: how many utterances a release comparison needs, from a pilot run.

``vocobench plan-size RUN --drop pesq_wb=0.1 --power 0.9`` and :func:`plan_size`.

Spread. ``σ_d`` is the standard deviation of the per-utterance difference the gate will see:

* one pilot run: a same-model comparison under fresh seeds, with as many seeds a side as the
  pilot has per utterance (``k``): ``σ_d² = 2·σ_w²/k``, ``σ_w²`` the pooled within-utterance
  variance across seeds (the one-way analysis-of-variance within mean square, ``ok`` items); it
  needs at least two seeds;
* configuration pairs (``match``, within the pilot) or a second run (``candidate``): the SD of
  the observed paired differences, paired exactly as ``vocobench compare`` pairs them.

Sizes (normal approximation of a one-sided paired test, :func:`vocobench.inference.sample_size`;
Chow, Shao & Wang 2008, §3.1), per gated configuration and metric with a planned drop ``Δ``,
allowance ``δ`` (the policy's), ``m`` gated tests (gated configurations × compared metrics):

* ``flag``: ``((z₁₋α/ₘ + z_power)·σ_d / (Δ − δ))²`` — a true drop ``Δ`` is found to exceed the
  allowance (a regression) with probability ``power`` at Holm's strictest step ``α/m``; no number
  suffices when ``Δ ≤ δ``;
* ``pass``: ``((z₁₋α + z_power)·σ_d / δ)²`` — a candidate with no true drop is shown within the
  allowance with probability ``power`` (each gated test alone; the intersection–union pass needs
  every one);
* ``needed``: the larger, and at least ``min_items`` and ``⌈log₂(m/α)⌉`` (the size check of
  :mod:`vocobench.gate.gating`).

The figures are estimates from a pilot's spread (itself uncertain) and the normal approximation,
which is slightly optimistic for small ``n``; round up generously.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import pandas as pd

from ..errors import InputError
from ..inference import needed, utterances_for_level
from ..keys import direction
from ..runtables import configurations, utterance_means
from ..store import Run
from .baseline import load_side
from .gating import select_gated
from .match import CFG, UKEY, compared_columns, config_pairs, prepared, shared_seeds
from .policy import Policy, resolve_policy

DROP_FIELD = "--drop"


@dataclass
class SizePlan:
    """Result of :func:`plan_size`: one row per gated configuration and planned metric."""

    rows: list[dict[str, Any]]
    power: float
    alpha: float
    tests: int                          # m, gated configurations × compared metrics
    spread: str                         # where σ_d comes from
    gated_by: str
    notes: list[str] = field(default_factory=list)

    @property
    def needed(self) -> int | None:
        """Utterances for every planned cell (``None`` if some cell can never be flagged)."""
        vals = [r["needed"] for r in self.rows]
        return None if not vals or any(v is None for v in vals) else max(vals)

    def table(self) -> tuple[list[str], list[list[str]]]:
        head = ["configuration", "metric", "paired SD", "allowed", "drop", "flag", "pass", "needed"]

        def num(v: Any) -> str:
            return "never" if v is None else f"{v}"
        return head, [[r["config"], r["metric"], f"{r['sd']:.3g}", f"{r['allowed']:.3g}",
                       f"{r['drop']:.3g}", num(r["flag"]), num(r["pass"]), num(r["needed"])]
                      for r in self.rows]


def parse_drops(texts: list[str]) -> dict[str, float]:
    """``METRIC=DROP`` strings (``pesq_wb=0.1``) → mapping; drops are positive numbers."""
    out = {}
    for t in texts:
        key, sep, val = str(t).partition("=")
        try:
            drop = float(val)
        except ValueError:
            drop = math.nan
        if not sep or not key.strip() or not math.isfinite(drop) or drop <= 0:
            raise InputError("expected METRIC=DROP with a positive drop in the metric's unit",
                             source="command line", field=DROP_FIELD, value=t)
        out[key.strip()] = drop
    if not out:
        raise InputError("give at least one --drop METRIC=DROP", source="command line",
                         field=DROP_FIELD)
    return out


def seed_spread(items: pd.DataFrame, label: str, column: str) -> tuple[float, int]:
    """``(σ_d, n)`` for a same-model comparison under fresh seeds (module docstring)."""
    ok = items[(items[CFG] == label) & items["_ok"]]
    v = pd.to_numeric(ok[column], errors="coerce")
    frame = pd.DataFrame({"u": ok[UKEY], "v": v}).dropna()
    groups = frame.groupby("u")["v"]
    k = int(round(groups.size().mean())) if len(frame) else 0
    dof = int((groups.size() - 1).sum())
    if k < 2 or dof < 1:
        return math.nan, int(groups.ngroups)
    within = float(((frame["v"] - groups.transform("mean")) ** 2).sum() / dof)
    return math.sqrt(2.0 * within / k), int(groups.ngroups)


def plan_size(pilot: "str | Path | Run", drops: Mapping[str, float], *, power: float | None = None,
              policy: "Policy | str | Path | Mapping[str, Any] | None" = None,
              candidate: "str | Path | Run | None" = None,
              match: Mapping[str, str] | None = None) -> SizePlan:
    """Utterances needed per gated configuration and metric (module docstring).

    ``drops``: metric column → drop to detect, in the metric's unit. ``power`` overrides the
    policy's. ``candidate``: a second run whose paired differences give the spread; ``match``:
    configuration pairs (within the pilot, or pilot → candidate).
    """
    pol = resolve_policy(policy)
    if power is not None:
        pol = pol.updated(power=power, source=f"{pol.source} + command line")
    run = load_side(pilot)
    other = load_side(candidate) if candidate is not None else None
    if run.items is None or not len(run.items):
        raise InputError("the pilot has no finished items", source=str(run.path))
    cols = compared_columns(run, other)[0] if other is not None else \
        [c for c in run.metric_columns if direction(run.metric_columns[c]) is not None
         and c in run.items.columns]
    for name in drops:
        if name not in cols:
            raise InputError("not a compared metric column; the pilot has: " + ", ".join(cols),
                             source="command line", field=DROP_FIELD, value=name)
    own = configurations(run.manifest, run.items)
    pairs = config_pairs(own, configurations(other.manifest, other.items) if other is not None
                         else own, match)
    gated, why = select_gated(pairs, pol, run, matched=bool(match))
    m = len(gated) * len(cols)
    alpha_m = pol.alpha / max(m, 1)
    items = prepared(run)
    paired = match is not None or other is not None
    if paired:
        spread = "SD of the observed paired differences" + (" (pilot against candidate)"
                                                           if other is not None else " (--match-config)")
    else:
        spread = "fresh seeds of the same model: √(2·σ_w²/k), σ_w² the within-utterance seed variance"
    citems = prepared(other) if other is not None else items
    if other is not None:                   # paired exactly as compare pairs them
        items, citems = shared_seeds(items, citems)[:2]
    rows = []
    for i in gated:
        b, c = pairs[i]
        for col, drop in drops.items():
            if paired:
                mb = utterance_means(items, col, [b], key=UKEY)[b.label]
                mc = utterance_means(citems, col, [c], key=UKEY)[c.label]
                d = (mc - mb).dropna().to_numpy(dtype=np.float64)
                sd, n = (float(np.std(d, ddof=1)) if d.size >= 2 else math.nan), int(d.size)
                base = float(mb.mean())
            else:
                sd, n = seed_spread(items, b.label, col)
                base = float(utterance_means(items, col, [b], key=UKEY)[b.label].mean())
            if not math.isfinite(sd):
                raise InputError("no spread to plan from: the pilot needs at least two seeds per "
                                 "utterance, or give --match-config / --candidate",
                                 source=str(run.path), field="seeds", value=b.label)
            allowed = pol.allowance(col).margin(base)
            flag = needed(sd, drop - allowed, alpha_m, pol.power)
            ok = needed(sd, allowed, pol.alpha, pol.power)
            floor = max(pol.min_items, utterances_for_level(alpha_m))
            need = None if flag is None or ok is None else max(flag, ok, floor)
            rows.append({"config": b.label if b == c else f"{b.label} → {c.label}",
                         "metric": col, "sd": sd, "pilot_utterances": n, "allowed": allowed,
                         "drop": drop, "flag": flag, "pass": ok, "needed": need})
    return SizePlan(rows, pol.power, pol.alpha, m, spread, why)
