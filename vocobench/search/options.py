"""The ``[search]`` table of a run config: what `vocobench search` looks for, and how hard.

Declared once here (keys, types, defaults, descriptions); :class:`SearchOptions` is the parsed
form. Budgets apply to each (steps, sampler) target separately.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

from ..errors import InputError
from ..params import Choice, Integer, ListOf, MapOf, Param, Real, String, Table, with_defaults

STRATEGIES = ("grid", "random", "local", "halving", "tpe", "cmaes")
OBJECTIVES = ("single", "constrained", "pareto")
SPACE_KINDS = ("geometric", "linear", "karras", "subsequence", "per-step")
HOLDOUT_FRACTION = 0.5          # our choice: as many utterances to confirm as to search
HALVING_ETA = 3                 # Li et al. 2017 (Hyperband): their default η = 3 (from memory)
GRID_POINTS = 5                 # our choice: points per continuous dimension of a grid
FINALISTS = 3                   # our choice: candidates confirmed on the held-out split

_NAMES = ListOf(String(nonempty=True))
SEARCH = Table("search", [
    Param("steps", ListOf(Integer(low=1), distinct=True), [6], "step counts to find schedules for"),
    Param("nfe", ListOf(Integer(low=1), distinct=True), None,
          "network-evaluation budgets instead of steps: per sampler, the most steps within each"),
    Param("samplers", _NAMES, None, "samplers to search with; unset: [sweep] samplers, else all"),
    Param("spaces", ListOf(MapOf(what="a table")), [{"kind": "geometric"}],
          "[[search.spaces]] tables: kind (" + ", ".join(SPACE_KINDS) + ") and its options"),
    Param("strategy", Choice(STRATEGIES), "halving",
          "how candidates are proposed (tpe and cmaes need the 'search' extra)"),
    Param("candidates", Integer(low=1), 27, "candidates drawn by random, halving (unless a grid), "
                                            "tpe and cmaes; start points of local"),
    Param("grid_points", Integer(low=2), GRID_POINTS, "values per continuous dimension of a grid"),
    Param("eta", Integer(low=2), HALVING_ETA, "successive halving keeps the best 1/eta per rung"),
    Param("min_utterances", Integer(low=1), 1, "utterances of the first halving rung"),
    Param("local_rounds", Integer(low=0), 12, "rounds of local refinement (strategy local)"),
    Param("objective", Choice(OBJECTIVES), "single",
          "single metric, primary metric under margins, or Pareto set over `metrics`"),
    Param("primary", String(nonempty=True), None,
          "metric column to optimise; unset: [decide] primary, else first of `metrics`"),
    Param("metrics", _NAMES, None, "columns of the Pareto set and of the held-out check; "
                                   "unset: [decide] metrics, else the primary"),
    Param("margins", MapOf(Real(low=0, keep_int=True), "a table of metric = margin"), {},
          "constrained objective: each metric at most this much worse than the reference "
          "on the search split"),
    Param("max_syntheses", Integer(low=1), None, "synthesis budget per target; unset: none"),
    Param("max_seconds", Real(low=0, closed="neither", keep_int=True), None,
          "wall-clock budget per target; unset: none"),
    Param("seeds", ListOf(Integer(low=0), distinct=True), [0], "noise seeds used while searching"),
    Param("holdout_seeds", ListOf(Integer(low=0), distinct=True), None,
          "fresh seeds for the held-out check; unset: as many as `seeds`, above them"),
    Param("holdout_fraction", Real(0, 1, closed="neither"), HOLDOUT_FRACTION,
          "share of utterances held out from the search"),
    Param("stratify", String(nonempty=True), "speaker",
          "utterance tag the split is stratified by (ignored when no utterance has it)"),
    Param("split_seed", Integer(low=0), 0, "seed of the deterministic split"),
    Param("finalists", Integer(low=1), FINALISTS, "best candidates confirmed on held-out data"),
    Param("reference", MapOf(), None, "reference schedule as a [[sweep.schedule]] table plus "
                                      "`steps`; unset: the full training schedule"),
    Param("seed", Integer(low=0), 0, "seed of random proposals"),
], doc="Options of `vocobench search` (schedule search with a held-out check).")


@dataclass(frozen=True)
@with_defaults(SEARCH)
class SearchOptions:
    """Validated ``[search]`` table (see :data:`SEARCH`)."""

    steps: list[int]
    nfe: list[int] | None
    samplers: list[str] | None
    spaces: list[dict[str, Any]]
    strategy: str
    candidates: int
    grid_points: int
    eta: int
    min_utterances: int
    local_rounds: int
    objective: str
    primary: str | None
    metrics: list[str] | None
    margins: Mapping[str, float]
    max_syntheses: int | None
    max_seconds: float | None
    seeds: list[int]
    holdout_seeds: list[int] | None
    holdout_fraction: float
    stratify: str
    split_seed: int
    finalists: int
    reference: dict[str, Any] | None
    seed: int
    source: str = "[search]"

    @classmethod
    def from_mapping(cls, table: Mapping[str, Any] | None, source: str = "[search]") -> "SearchOptions":
        opts = cls(source=source, **SEARCH.parse(table or {}, source))
        if opts.nfe is not None and "steps" in (table or {}):
            raise InputError("give steps or nfe, not both", source=source, field="search.nfe",
                             value=opts.nfe)
        fresh = opts.fresh_seeds()
        if set(fresh) & set(opts.seeds):
            raise InputError("held-out seeds must differ from the search seeds", source=source,
                             field="search.holdout_seeds", value=sorted(set(fresh) & set(opts.seeds)))
        return opts

    def fresh_seeds(self) -> list[int]:
        """Seeds of the held-out check: given, else as many as the search's, above them."""
        if self.holdout_seeds:
            return list(self.holdout_seeds)
        top = max(self.seeds) + 1
        return list(range(top, top + len(self.seeds)))

    def describe(self) -> dict[str, Any]:
        return {k: getattr(self, k) for k in SEARCH} | {"holdout_seeds": self.fresh_seeds()}
