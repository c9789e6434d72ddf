"""Search spaces of N-step inference schedules, all seen through unit coordinates u ∈ [0, 1]^d.

* ``geometric`` / ``linear``: β geometrically / linearly spaced with free endpoints β_1, β_N.
* ``karras``: noise levels σ = √((1−ᾱ)/ᾱ) spaced as in Karras et al. 2022 ("Elucidating the design
  space of diffusion-based generative models", Eq. 5): σ_i = (σ_max^{1/ρ} + i/(N−1)·(σ_min^{1/ρ} −
  σ_max^{1/ρ}))^ρ, with free log-SNR endpoints λ = −2·ln σ and free ρ.
* ``subsequence``: N training steps out of a candidate list (Song et al. 2021, DDIM, Sec. 4.2);
  ᾱ of the schedule equal the training ᾱ at the chosen steps.
* ``per-step``: each β_i from a list of values, the grid search of the fast-sampling literature
  (Chen et al. 2021, WaveGrad, Sec. 5; Kong et al. 2021, DiffWave, Sec. 5).

A continuous dimension maps u linearly (or log-linearly) onto its range; a discrete one picks
value ⌊u·k⌋ of its k values. Every space yields an explicit β list, so a winner pastes into
``[[sweep.schedule]]`` as ``kind = "explicit"``.
"""
from __future__ import annotations

import hashlib
import itertools
import math
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import InputError
from ..params import Boolean, Choice, Custom, Integer, ListOf, Param, Real, Table
from ..schedules import NoiseSchedule, from_alpha_bars, geometric, karras, linear
from .options import SPACE_KINDS

# Default ranges: our choices, wide enough to hold the usual published endpoints
# (β_1 = 1e-4, β_N = 0.02..0.5: Ho et al. 2020, Kong et al. 2021; ρ = 7: Karras et al. 2022).
GEOMETRIC_RANGES = {"beta_start": (1e-6, 1e-2), "beta_end": (0.05, 0.9)}
LINEAR_RANGES = {"beta_start": (1e-6, 1e-3), "beta_end": (0.01, 0.9)}
KARRAS_RANGES = {"logsnr_max": (2.0, 16.0), "logsnr_min": (-12.0, -1.0), "rho": (1.0, 12.0)}
# per-step candidate β values: our choice, spanning the fast-schedule β of Kong et al. 2021
# (values from memory)
PER_STEP_BETAS = (1e-4, 1e-3, 1e-2, 0.05, 0.2, 0.5, 0.7)
SUBSEQUENCE_POINTS = 16         # our choice: log-spaced candidate training steps


def _pair(v: Any) -> tuple[float, float]:
    if (not isinstance(v, (list, tuple)) or len(v) != 2
            or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v)
            or not v[0] < v[1]):
        raise ValueError("must be [low, high] with low < high")
    return float(v[0]), float(v[1])


_RANGE = Custom("[low, high]", _pair, "list")
SPACE = Table("search.spaces", [
    Param("kind", Choice(SPACE_KINDS),
          doc="the family"),
    Param("beta_start", _RANGE, None, "geometric/linear: range of β_1"),
    Param("beta_end", _RANGE, None, "geometric/linear: range of β_N"),
    Param("logsnr_max", _RANGE, None, "karras: range of the cleanest log-SNR"),
    Param("logsnr_min", _RANGE, None, "karras: range of the noisiest log-SNR"),
    Param("rho", _RANGE, None, "karras: range of ρ"),
    Param("betas", ListOf(Real(0, 1, closed="neither")), None, "per-step: candidate β values"),
    Param("monotone", Boolean(), True, "per-step: β never decreases along the steps"),
    Param("train_steps", ListOf(Integer(low=1)),
          None, "subsequence: candidate training steps (1-based); unset: log-spaced"),
], entry="option", doc="One space of schedules searched.")


@dataclass(frozen=True)
class Dim:
    """One coordinate: a range (``log`` spaced or not) or a list of discrete ``values``."""

    name: str
    low: float = 0.0
    high: float = 1.0
    log: bool = False
    values: tuple[float, ...] | None = None

    def at(self, u: float) -> float:
        u = min(max(float(u), 0.0), 1.0)
        if self.values is not None:
            return self.values[min(len(self.values) - 1, int(u * len(self.values)))]
        if self.log:
            return math.exp(math.log(self.low) + u * (math.log(self.high) - math.log(self.low)))
        return self.low + u * (self.high - self.low)

    def grid(self, k: int) -> list[float]:
        """Unit coordinates of the grid: each value once, or ``k`` evenly spaced points."""
        if self.values is not None:
            n = len(self.values)
            return [(i + 0.5) / n for i in range(n)]
        return list(np.linspace(0.0, 1.0, k))

    @property
    def resolution(self) -> float:
        """Smallest useful move in u (one value for a discrete dimension)."""
        return 1.0 / len(self.values) if self.values is not None else 1e-3


@dataclass(frozen=True)
class Candidate:
    """A point of a space: its parameters and the β list they give."""

    space: str
    params: Mapping[str, float]
    schedule: NoiseSchedule
    u: tuple[float, ...] = ()

    @property
    def name(self) -> str:
        """``search-`` + hash of the β list: equal schedules share one name, hence one cache key."""
        text = ",".join(repr(float(b)) for b in self.schedule.betas)
        return "search-" + hashlib.sha256(text.encode()).hexdigest()[:10]

    @property
    def betas(self) -> list[float]:
        return [float(b) for b in self.schedule.betas]


@dataclass
class Space:
    """A family of N-step schedules over unit coordinates."""

    kind: str
    steps: int
    dims: list[Dim]
    options: dict[str, Any] = field(default_factory=dict)
    training: NoiseSchedule | None = None

    def candidate(self, u: Sequence[float]) -> Candidate | None:
        """The schedule at ``u``, or None where the point gives no valid schedule."""
        vals = [d.at(x) for d, x in zip(self.dims, u)]
        try:
            betas = self._betas(vals)
            sched = NoiseSchedule(np.asarray(betas, dtype=np.float64), self.kind)
        except (InputError, ValueError, FloatingPointError):
            return None
        params = {d.name: v for d, v in zip(self.dims, vals)}
        return Candidate(self.kind, params, sched, tuple(float(x) for x in u))

    def grid(self, k: int) -> list[Candidate]:
        """Every valid point of the grid (each discrete value; ``k`` points per range)."""
        if self.kind == "subsequence" or (self.kind == "per-step" and self.options["monotone"]):
            pick = (itertools.combinations if self.kind == "subsequence"
                    else itertools.combinations_with_replacement)
            n = len(self.dims[0].values or ())
            points = ([(i + 0.5) / n for i in c] for c in pick(range(n), self.steps))
        else:
            points = itertools.product(*(d.grid(k) for d in self.dims))
        return [c for c in (self.candidate(p) for p in points) if c is not None]

    def _betas(self, v: list[float]) -> np.ndarray:
        n = self.steps
        if self.kind in ("geometric", "linear"):
            if v[0] >= v[1] and n > 1:
                raise ValueError("β_1 must be below β_N")
            return (geometric if self.kind == "geometric" else linear)(n, v[0], v[1]).betas
        if self.kind == "karras":
            lam_max, lam_min, rho = v            # λ = ln(ᾱ/(1−ᾱ)) = −2·ln σ
            return karras(n, rho=rho, sigma_min=math.exp(-lam_max / 2),
                          sigma_max=math.exp(-lam_min / 2)).betas
        if self.kind == "subsequence":
            tau = [int(x) for x in v]
            if len(set(tau)) != n:
                raise ValueError("training steps repeat")
            ab = self.training.alpha_bars[np.sort(tau) - 1]          # type: ignore[union-attr]
            return from_alpha_bars(ab, "subsequence", {}).betas
        if self.options["monotone"] and any(b > a for a, b in zip(v[1:], v)):
            raise ValueError("β decreases")
        return np.asarray(v)


def make_space(table: Mapping[str, Any], steps: int, training: NoiseSchedule | None,
               source: str = "[search]") -> Space:
    """Parse one ``[[search.spaces]]`` table into a :class:`Space` of ``steps``-step schedules."""
    o = SPACE.parse(dict(table), source)
    kind = o["kind"]
    unused = [k for k, v in o.items() if v is not None and k not in _OPTIONS_OF[kind]]
    if unused:
        raise InputError(f"option not used by kind '{kind}'", source=source,
                         field=f"search.spaces.{unused[0]}", value=o[unused[0]])
    if kind in ("geometric", "linear", "karras"):
        ranges = {"geometric": GEOMETRIC_RANGES, "linear": LINEAR_RANGES, "karras": KARRAS_RANGES}[kind]
        dims = [Dim(k, *(o[k] or r), log=k.startswith("beta")) for k, r in ranges.items()]
        return Space(kind, steps, dims, o)
    if kind == "per-step":
        vals = tuple(sorted(o["betas"] or PER_STEP_BETAS))
        return Space(kind, steps, [Dim(f"beta_{i + 1}", values=vals) for i in range(steps)], o)
    if training is None:
        raise InputError("a subsequence space needs a denoiser with a training schedule",
                         source=source, field="search.spaces.kind", value=kind)
    T = len(training)
    pts = o["train_steps"] or np.unique(np.round(np.geomspace(1, T, SUBSEQUENCE_POINTS))).astype(int)
    pts = tuple(sorted({int(p) for p in pts}))
    if pts[-1] > T or len(pts) < steps:
        raise InputError(f"need at least {steps} distinct training steps in 1..{T}", source=source,
                         field="search.spaces.train_steps", value=list(pts))
    return Space(kind, steps, [Dim(f"step_{i + 1}", values=pts) for i in range(steps)], o,
                 training)


_OPTIONS_OF = {"geometric": {"kind", "beta_start", "beta_end", "monotone"},
               "linear": {"kind", "beta_start", "beta_end", "monotone"},
               "karras": {"kind", "logsnr_max", "logsnr_min", "rho", "monotone"},
               "subsequence": {"kind", "train_steps", "monotone"},
               "per-step": {"kind", "betas", "monotone"}}
