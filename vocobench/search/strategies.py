"""How candidates are proposed: exhaustive grid, random, local refinement, successive halving,
and (with the ``search`` extra) optuna's TPE or CMA-ES.

Each strategy calls ``ev.score(candidates, n_utterances)`` and stops when it is done or the
evaluator raises :class:`~vocobench.search.engine.BudgetSpent`; every score is kept by the
evaluator, so the best candidate so far survives an early stop.

* Successive halving (Jamieson & Talwalkar 2016, "Non-stochastic best arm identification and
  hyperparameter optimization"; Li et al. 2017, "Hyperband", Alg. 1 inner loop): all candidates on
  r utterances, the best 1/η promoted to η·r utterances, until the whole search split.
* Local refinement: coordinate pattern search (Hooke & Jeeves 1961) in unit coordinates from the
  best point found so far, halving the step when no neighbour improves.
* TPE (Bergstra et al. 2011) and CMA-ES (Hansen & Ostermeier 2001) as implemented by optuna.
"""
from __future__ import annotations

import math
from typing import Any, Callable

import numpy as np

from ..errors import InputError
from .spaces import Candidate, Space

LOCAL_START_STEP = 0.25         # our choice: a quarter of each range
RANDOM_TRIES = 50               # our choice: draws per wanted candidate before giving up on invalid regions


def random_candidates(space: Space, n: int, rng: np.random.Generator) -> list[Candidate]:
    out: list[Candidate] = []
    for _ in range(n * RANDOM_TRIES):
        if len(out) == n:
            break
        c = space.candidate(rng.random(len(space.dims)))
        if c is not None:
            out.append(c)
    return out


def grid(space: Space, ev: Any, o: Any, rng: np.random.Generator) -> None:
    cands = space.grid(o.grid_points)
    ev.plan(len(cands) * ev.n_search * len(ev.seeds))
    ev.score(cands)


def random(space: Space, ev: Any, o: Any, rng: np.random.Generator) -> None:
    cands = random_candidates(space, o.candidates, rng)
    ev.plan(len(cands) * ev.n_search * len(ev.seeds))
    ev.score(cands)


def halving_rungs(n_cands: int, n_utts: int, r0: int, eta: int) -> list[tuple[int, int]]:
    """(candidates, utterances) per rung: ⌈n/η⌉ survivors, η·r utterances, until all utterances."""
    rungs, n, r = [], n_cands, min(r0, n_utts)
    while True:
        rungs.append((n, r))
        if r >= n_utts or n == 1:
            return rungs
        n, r = max(1, math.ceil(n / eta)), min(n_utts, r * eta)


def initial_set(space: Space, o: Any, rng: np.random.Generator) -> list[Candidate]:
    """The grid when it has at most ``candidates`` points, else that many drawn from it."""
    g = space.grid(o.grid_points)
    if len(g) <= o.candidates:
        return g
    return [g[i] for i in sorted(rng.choice(len(g), o.candidates, replace=False))]


def halving(space: Space, ev: Any, o: Any, rng: np.random.Generator) -> None:
    cands = initial_set(space, o, rng)
    rungs = halving_rungs(len(cands), ev.n_search, o.min_utterances, o.eta)
    ev.plan(sum(n * (r - q) for (n, r), (_, q) in zip(rungs, [(0, 0)] + rungs)) * len(ev.seeds))
    for k, (_, r) in enumerate(rungs):
        vals = ev.score(cands, r)
        if k + 1 < len(rungs):
            order = sorted(range(len(cands)), key=lambda i: -vals[i])     # stable: ties keep order
            cands = [cands[i] for i in order[:rungs[k + 1][0]]]


def local(space: Space, ev: Any, o: Any, rng: np.random.Generator) -> None:
    done = [h for h in ev.complete() if h["candidate"].space == space.kind and h["candidate"].u]
    if done:
        best = done[0]["candidate"]
        best_v = done[0]["value"]
    else:
        starts = random_candidates(space, o.candidates, rng)
        vals = ev.score(starts)
        i = int(np.argmax(vals))
        best, best_v = starts[i], vals[i]
    step = np.full(len(space.dims), LOCAL_START_STEP)
    floor = np.array([d.resolution for d in space.dims])
    ev.plan(o.local_rounds * 2 * len(space.dims) * ev.n_search * len(ev.seeds))
    for _ in range(o.local_rounds):
        u = np.array(best.u)
        moves = []
        for d in range(len(space.dims)):
            for sign in (-1, 1):
                v = u.copy()
                v[d] = min(1.0, max(0.0, v[d] + sign * step[d]))
                c = space.candidate(v)
                if c is not None and c.name != best.name:
                    moves.append(c)
        vals = ev.score(moves) if moves else []
        if len(vals) and max(vals) > best_v:
            i = int(np.argmax(vals))
            best, best_v = moves[i], vals[i]
        elif np.all(step <= floor):
            return
        else:
            step = np.maximum(step / 2, floor)


def _optuna(kind: str) -> Callable[[Space, Any, Any, np.random.Generator], None]:
    def run(space: Space, ev: Any, o: Any, rng: np.random.Generator) -> None:
        from importlib.util import find_spec

        # optuna's CMA-ES sampler runs on the cmaes package
        for need in ("optuna", *(("cmaes",) if kind == "cmaes" else ())):
            if find_spec(need) is None:
                raise InputError(f"strategy needs {need}: pip install 'vocobench[search]'",
                                 field="search.strategy", value=kind)
        import optuna

        optuna.logging.set_verbosity(optuna.logging.WARNING)
        sampler = (optuna.samplers.TPESampler(seed=o.seed) if kind == "tpe"
                   else optuna.samplers.CmaEsSampler(seed=o.seed))
        study = optuna.create_study(direction="maximize", sampler=sampler)
        ev.plan(o.candidates * ev.n_search * len(ev.seeds))
        for _ in range(o.candidates):
            trial = study.ask()
            u = [trial.suggest_float(d.name, 0.0, 1.0) for d in space.dims]
            c = space.candidate(u)
            v = ev.score([c])[0] if c is not None else -math.inf
            if math.isfinite(v):
                study.tell(trial, v)
            else:
                study.tell(trial, state=optuna.trial.TrialState.FAIL)
    return run


STRATEGIES: dict[str, Callable[[Space, Any, Any, np.random.Generator], None]] = {
    "grid": grid, "random": random, "local": local, "halving": halving,
    "tpe": _optuna("tpe"), "cmaes": _optuna("cmaes"),
}
