"""Noise (β) schedules: builders, validation, and views as ᾱ and noise levels.

Conventions (Ho et al. 2020, "Denoising Diffusion Probabilistic Models"): step t = 1..N has
β_t ∈ (0, 1), α_t = 1 − β_t, ᾱ_t = ∏_{s≤t} α_s, and x_t = √ᾱ_t·x_0 + √(1−ᾱ_t)·ε.
Arrays here are 0-indexed: ``betas[0]`` is β_1.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np

from .errors import InputError
from .params import Choice, ListOf, Param, Real, Table, is_integer

# Ho et al. 2020, Sec. 4: T = 1000, β linear from 1e-4 to 0.02.
DDPM_T = 1000
DDPM_BETA_START = 1e-4
DDPM_BETA_END = 0.02
# Nichol & Dhariwal 2021, "Improved DDPM", Eq. 17: offset s = 0.008, β clipped at 0.999.
COSINE_S = 0.008
COSINE_MAX_BETA = 0.999
# Kong et al. 2021, "DiffWave", fast-sampling inference schedule for the 6-step base model.
# Values from memory of the paper/reference code, not re-checked against the paper: treat as such.
KONG2021_FAST6 = (0.0001, 0.001, 0.01, 0.05, 0.2, 0.5)
GEOMETRIC_BETA_END = 0.5        # our choice: ends noisy enough for few-step sweeps
STRIDES = ("uniform", "quadratic")   # Song et al. 2021, App. D.2
# Karras et al. 2022 ("EDM"), Eq. 5 and Table 1: σ_i spaced uniformly in σ^{1/ρ}, ρ = 7.
KARRAS_RHO = 7.0


@dataclass(frozen=True)
class NoiseSchedule:
    """A validated β sequence; ``train_steps`` holds training-step indices for sub-sequences."""

    betas: np.ndarray
    name: str = "custom"
    train_steps: np.ndarray | None = None
    params: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        b = np.asarray(self.betas, dtype=np.float64)
        object.__setattr__(self, "betas", b)
        validate_betas(b, source=f"schedule '{self.name}'")

    def __len__(self) -> int:
        return len(self.betas)

    @property
    def alphas(self) -> np.ndarray:
        return 1.0 - self.betas

    @property
    def alpha_bars(self) -> np.ndarray:
        return np.cumprod(self.alphas)

    @property
    def noise_levels(self) -> np.ndarray:
        """√ᾱ_t, the signal scale used as the continuous noise level by e.g. WaveGrad."""
        return np.sqrt(self.alpha_bars)

    @property
    def sigmas(self) -> np.ndarray:
        """√(1−ᾱ_t), the noise standard deviation at step t."""
        return np.sqrt(1.0 - self.alpha_bars)

    def to_frame(self):
        import pandas as pd

        return pd.DataFrame({"step": np.arange(1, len(self) + 1), "beta": self.betas,
                             "alpha_bar": self.alpha_bars, "noise_level": self.noise_levels,
                             "sigma": self.sigmas})

    def describe(self) -> dict[str, Any]:
        d: dict[str, Any] = {"name": self.name, "steps": len(self), **dict(self.params),
                             "betas": [float(x) for x in self.betas]}
        if self.train_steps is not None:
            d["train_steps"] = [int(x) for x in self.train_steps]
        return d


def validate_betas(betas: np.ndarray, *, source: str = "schedule", length: int | None = None) -> None:
    if betas.ndim != 1 or betas.size == 0:
        raise InputError("β must be a non-empty 1-D list", source=source, field="betas",
                         value=betas.shape)
    if not np.all(np.isfinite(betas)):
        raise InputError("β must be finite", source=source, field="betas",
                         value=betas[~np.isfinite(betas)][0].item())
    out = (betas <= 0) | (betas >= 1)
    if np.any(out):
        i = int(np.flatnonzero(out)[0])
        raise InputError(f"β must lie in (0, 1); β_{i + 1} does not", source=source,
                         field="betas", value=float(betas[i]))
    if length is not None and betas.size != length:
        raise InputError(f"expected {length} β values", source=source, field="betas",
                         value=betas.size)


# -- builders ---------------------------------------------------------------------------------
def linear(n: int, beta_start: float = DDPM_BETA_START, beta_end: float = DDPM_BETA_END) -> NoiseSchedule:
    """β linearly spaced (Ho et al. 2020)."""
    return NoiseSchedule(np.linspace(beta_start, beta_end, _n(n)), "linear",
                         params={"beta_start": beta_start, "beta_end": beta_end})


def quadratic(n: int, beta_start: float = DDPM_BETA_START, beta_end: float = DDPM_BETA_END) -> NoiseSchedule:
    """√β linearly spaced (the 'quad' option of Ho et al. 2020's reference code; common practice)."""
    b = np.linspace(math.sqrt(beta_start), math.sqrt(beta_end), _n(n)) ** 2
    return NoiseSchedule(b, "quadratic", params={"beta_start": beta_start, "beta_end": beta_end})


def geometric(n: int, beta_start: float = DDPM_BETA_START,
              beta_end: float = GEOMETRIC_BETA_END) -> NoiseSchedule:
    """β geometrically spaced: equal ratios between steps (common practice, no source)."""
    b = np.geomspace(beta_start, beta_end, _n(n))
    return NoiseSchedule(b, "geometric", params={"beta_start": beta_start, "beta_end": beta_end})


def cosine(n: int, s: float = COSINE_S, max_beta: float = COSINE_MAX_BETA) -> NoiseSchedule:
    """ᾱ(t) = f(t)/f(0), f(t) = cos²(((t/N + s)/(1 + s))·π/2), β clipped (Nichol & Dhariwal 2021)."""
    n = _n(n)
    t = np.arange(n + 1) / n
    f = np.cos((t + s) / (1 + s) * np.pi / 2) ** 2
    b = np.clip(1 - f[1:] / f[:-1], 0.0, max_beta)
    b = np.maximum(b, 1e-12)
    return NoiseSchedule(b, "cosine", params={"s": s, "max_beta": max_beta})


def kong_fast6() -> NoiseSchedule:
    """The 6-step fast-sampling β set of Kong et al. 2021 (DiffWave); values from memory."""
    return NoiseSchedule(np.array(KONG2021_FAST6), "kong2021-fast6",
                         params={"source": "Kong et al. 2021, values from memory"})


def explicit(betas: Sequence[float], name: str = "explicit") -> NoiseSchedule:
    b = np.asarray(list(betas), dtype=np.float64)
    return NoiseSchedule(b, name)


def subsequence(training: NoiseSchedule, n: int, stride: str = STRIDES[0]) -> NoiseSchedule:
    """Sub-sequence τ of a training schedule (Song et al. 2021, DDIM, Sec. 4.2 and App. D.2).

    ``uniform``: τ_i = ⌊c·i⌋; ``quadratic``: τ_i = ⌊c·i²⌋, with c chosen so the last step is
    (close to) T. The β of the sub-sequence are 1 − ᾱ_{τ_i}/ᾱ_{τ_{i−1}} so that its ᾱ equal the
    training ᾱ at the chosen steps.
    """
    n = _n(n)
    T = len(training)
    if n > T:
        raise InputError(f"cannot take {n} steps out of a {T}-step training schedule",
                         source=f"schedule '{training.name}'", field="steps", value=n)
    i = np.arange(1, n + 1, dtype=np.float64)
    if stride == "uniform":
        tau = np.floor(i * T / n)
    elif stride == "quadratic":
        tau = np.floor((i / n) ** 2 * T)
    else:
        raise InputError("stride must be 'uniform' or 'quadratic'", field="stride", value=stride)
    tau = np.clip(tau.astype(int), 1, T)
    # strictly increasing steps: push collisions forward (quadratic stride at small i)
    for k in range(1, n):
        tau[k] = max(tau[k], tau[k - 1] + 1)
    if tau[-1] > T:
        tau = tau - (tau[-1] - T)
    ab = training.alpha_bars[tau - 1]
    prev = np.concatenate([[1.0], ab[:-1]])
    b = 1 - ab / prev
    return NoiseSchedule(b, f"{stride}-stride", train_steps=tau - 1,
                         params={"stride": stride, "training": training.name, "training_steps": T})


# -- inference spacings mapped onto a training schedule --------------------------------------
def training_alpha_bar(training: NoiseSchedule, t: np.ndarray) -> np.ndarray:
    """ᾱ at fractional 0-based training steps ``t``: linear interpolation on √ᾱ, the rule by which
    every inference level is mapped back onto training steps (Kong et al. 2021)."""
    return np.interp(t, np.arange(len(training)), training.noise_levels) ** 2


def from_alpha_bars(ab: np.ndarray, name: str, params: Mapping[str, Any]) -> NoiseSchedule:
    """The schedule whose ᾱ_1..ᾱ_N are ``ab`` (decreasing): β_i = 1 − ᾱ_i/ᾱ_{i−1}, ᾱ_0 = 1."""
    ab = np.asarray(ab, dtype=np.float64)
    return NoiseSchedule(1.0 - ab / np.concatenate([[1.0], ab[:-1]]), name, params=params)


def _needs_training(training: NoiseSchedule | None, kind: str) -> NoiseSchedule:
    if training is None:
        raise InputError(f"a '{kind}' schedule needs a denoiser with a training schedule (or "
                         "explicit range options)", field="kind", value=kind)
    return training


def _training_range(training: NoiseSchedule | None, kind: str) -> tuple[float, float]:
    """ᾱ at the noisiest and at the least noisy training step."""
    ab = _needs_training(training, kind).alpha_bars
    return float(ab[-1]), float(ab[0])


def uniform_t(n: int, training: NoiseSchedule | None = None) -> NoiseSchedule:
    """Steps uniform in training time from the first to the last training step, fractional steps
    allowed (the "time-uniform" spacing of Lu et al. 2022, Sec. 3.4 and App. D)."""
    tr = _needs_training(training, "uniform-t")
    t = np.linspace(0.0, len(tr) - 1.0, _n(n)) if n > 1 else np.array([len(tr) - 1.0])
    return from_alpha_bars(training_alpha_bar(tr, t), "uniform-t", {})


def logsnr(n: int, training: NoiseSchedule | None = None, lambda_min: float | None = None,
           lambda_max: float | None = None) -> NoiseSchedule:
    """Steps uniform in λ = ½·log(ᾱ/(1−ᾱ)) (Lu et al. 2022, "logSNR" spacing), between the
    training schedule's ends unless ``lambda_min``/``lambda_max`` are given."""
    if lambda_min is None or lambda_max is None:
        lo, hi = _training_range(training, "logsnr")
        lambda_min = 0.5 * math.log(lo / (1 - lo)) if lambda_min is None else lambda_min
        lambda_max = 0.5 * math.log(hi / (1 - hi)) if lambda_max is None else lambda_max
    lam = np.linspace(lambda_max, lambda_min, _n(n)) if n > 1 else np.array([lambda_min])
    return from_alpha_bars(0.5 * (1 + np.tanh(lam)), "logsnr",
                           {"lambda_min": lambda_min, "lambda_max": lambda_max})


def karras(n: int, training: NoiseSchedule | None = None, rho: float = KARRAS_RHO,
           sigma_min: float | None = None, sigma_max: float | None = None) -> NoiseSchedule:
    """σ_i = (σ_max^{1/ρ} + i/(N−1)·(σ_min^{1/ρ} − σ_max^{1/ρ}))^ρ (Karras et al. 2022, Eq. 5),
    with σ = √((1−ᾱ)/ᾱ) (their VP ↔ σ mapping, Sec. 4) so ᾱ = 1/(1+σ²); the σ range defaults to
    the training schedule's."""
    if sigma_min is None or sigma_max is None:
        lo, hi = _training_range(training, "karras")
        sigma_max = math.sqrt((1 - lo) / lo) if sigma_max is None else sigma_max
        sigma_min = math.sqrt((1 - hi) / hi) if sigma_min is None else sigma_min
    i = np.arange(_n(n), dtype=np.float64)[::-1]                 # σ_1 (least noisy) first
    frac = i / (n - 1) if n > 1 else np.zeros(1)
    sig = (sigma_max ** (1 / rho) + frac * (sigma_min ** (1 / rho) - sigma_max ** (1 / rho))) ** rho
    return from_alpha_bars(1.0 / (1.0 + sig ** 2), "karras",
                           {"rho": rho, "sigma_min": sigma_min, "sigma_max": sigma_max})


SPACINGS: dict[str, Callable[..., NoiseSchedule]] = {
    "uniform-t": uniform_t, "logsnr": logsnr, "karras": karras,
}


def _n(n: int) -> int:
    if not is_integer(n) or n <= 0:
        raise InputError("number of steps must be a positive integer", field="steps", value=n)
    return int(n)


# -- schedule specs used in a sweep ------------------------------------------------------------
@dataclass(frozen=True)
class ScheduleSpec:
    """How a sweep builds an inference schedule of N steps: a named family plus its options."""

    name: str
    kind: str
    options: Mapping[str, Any] = field(default_factory=dict)

    @property
    def fixed_length(self) -> int | None:
        if self.kind == "kong2021-fast6":
            return len(KONG2021_FAST6)
        if self.kind == "explicit":
            return len(self.options.get("betas", []))
        return None

    def build(self, steps: int, training: NoiseSchedule | None = None) -> NoiseSchedule:
        opts = dict(self.options)
        if self.kind == "stride":
            if training is None:
                raise InputError("a 'stride' schedule needs a denoiser with a training schedule",
                                 source=f"schedule '{self.name}'", field="kind", value=self.kind)
            s = subsequence(training, steps, opts.get("stride", STRIDES[0]))
        elif self.kind == "explicit":
            s = explicit(opts["betas"])
            validate_betas(s.betas, source=f"schedule '{self.name}'", length=steps)
        elif self.kind in SPACINGS:
            s = SPACINGS[self.kind](steps, training, **opts)
        elif self.kind == "kong2021-fast6":
            s = kong_fast6()
            validate_betas(s.betas, source=f"schedule '{self.name}'", length=steps)
        else:
            s = BUILDERS[self.kind](steps, **opts)
        return NoiseSchedule(s.betas, self.name, s.train_steps, {"kind": self.kind, **s.params})


BUILDERS: dict[str, Callable[..., NoiseSchedule]] = {
    "linear": linear, "quadratic": quadratic, "geometric": geometric, "cosine": cosine,
}
KINDS = sorted([*BUILDERS, *SPACINGS, "stride", "explicit", "kong2021-fast6"])
_IN_UNIT = Real(0, 1, closed="neither", keep_int=True)       # a β: 0 < β < 1
_POSITIVE = Real(low=0, closed="neither", keep_int=True)


def _kind(kind: str, doc: str, *params: Param, rules: Sequence[tuple[str, str, str]] = ()) -> Table:
    return Table("sweep.schedule", params, entry="option", doc=doc, rules=rules,
                 title=f'`[[sweep.schedule]]` kind = "{kind}"')


def _betas(start: float, end: float) -> tuple[Param, Param]:
    return (Param("beta_start", _IN_UNIT, start, "β_1"), Param("beta_end", _IN_UNIT, end, "β_N"))


# Options of each schedule kind, besides ``name`` (a label; default: the kind) and ``kind``.
KIND_OPTIONS: dict[str, Table] = {
    "linear": _kind("linear", "β linearly spaced (Ho et al. 2020).",
                    *_betas(DDPM_BETA_START, DDPM_BETA_END)),
    "quadratic": _kind("quadratic", "√β linearly spaced.", *_betas(DDPM_BETA_START, DDPM_BETA_END)),
    "geometric": _kind("geometric", "β geometrically spaced.",
                       *_betas(DDPM_BETA_START, GEOMETRIC_BETA_END)),
    "cosine": _kind("cosine", "Nichol & Dhariwal 2021, Eq. 17.",
                    Param("s", _POSITIVE, COSINE_S, "offset s"),
                    Param("max_beta", _IN_UNIT, COSINE_MAX_BETA, "β clipped here")),
    "stride": _kind("stride", "Sub-sequence of the denoiser's training schedule (Song et al. "
                    "2021).", Param("stride", Choice(STRIDES), STRIDES[0],
                                    "training steps spaced uniformly or quadratically")),
    "explicit": _kind("explicit", "A fixed β list; the sweep's steps are its length.",
                      Param("betas", ListOf(_IN_UNIT), doc="β_1..β_N, each in (0, 1)")),
    "kong2021-fast6": _kind("kong2021-fast6", "The 6-step set of Kong et al. 2021 (from memory)."),
    "uniform-t": _kind("uniform-t", "Uniform in training time, first to last training step "
                       "(Lu et al. 2022)."),
    "logsnr": _kind("logsnr", "Uniform in log-SNR λ (Lu et al. 2022); range: the training "
                    "schedule's unless given.",
                    Param("lambda_min", Real(keep_int=True), None, "λ of the noisiest level"),
                    Param("lambda_max", Real(keep_int=True), None, "λ of the least noisy level")),
    "karras": _kind("karras", "Karras et al. 2022, Eq. 5 (the EDM time discretisation); σ range: "
                    "the training schedule's unless given.",
                    Param("rho", _POSITIVE, KARRAS_RHO, "ρ"),
                    Param("sigma_min", _POSITIVE, None, "σ of the least noisy level"),
                    Param("sigma_max", _POSITIVE, None, "σ of the noisiest level"),
                    rules=[("sigma_min", "<", "sigma_max")]),
}


def make_spec(d: Mapping[str, Any], source: str = "config") -> ScheduleSpec:
    """Parse one ``[[sweep.schedule]]`` table: ``name``, ``kind`` and the kind's options."""
    d = dict(d)
    kind = d.pop("kind", None)
    name = d.pop("name", kind)
    if kind not in KIND_OPTIONS:
        raise InputError(f"unknown schedule kind; valid kinds: {', '.join(KINDS)}", source=source,
                         field="sweep.schedule.kind", value=kind)
    if not isinstance(name, str) or not name.strip():
        raise InputError("must be a non-empty string (a label such as \"uniform\")",
                         source=source, field="sweep.schedule.name", value=name)
    KIND_OPTIONS[kind].parse(d, source, defaults=False)    # builders default to the same constants
    return ScheduleSpec(name, kind, d)


def named_examples() -> dict[str, NoiseSchedule]:
    """Schedules shown by ``vocobench schedules``."""
    train = linear(DDPM_T)
    return {
        "linear (T=1000, Ho et al. 2020)": train,
        "cosine (T=1000, Nichol & Dhariwal 2021)": cosine(DDPM_T),
        "quadratic (T=50)": quadratic(50, 1e-4, 0.05),
        "geometric (T=8)": geometric(8),
        "kong2021-fast6 (Kong et al. 2021, from memory)": kong_fast6(),
        "uniform stride 10 of linear T=1000 (Song et al. 2021)": subsequence(train, 10, "uniform"),
        "quadratic stride 10 of linear T=1000 (Song et al. 2021)": subsequence(train, 10, "quadratic"),
        "logsnr 10 over linear T=1000 (Lu et al. 2022)": logsnr(10, train),
        "karras 10 over linear T=1000 (Karras et al. 2022)": karras(10, train),
    }
