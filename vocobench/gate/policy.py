"""Gate policy: how much worse a candidate may be before a configuration is a regression.

Default policy (our choice; the reasoning is given per line)
------------------------------------------------------------
Allowed drop of the mean, direction-aware, in the metric's own unit:

* ``pesq_wb``, ``pesq_nb``: **0.05 MOS-LQO**. PESQ differences of about 0.1 between systems are
  commonly read as the smallest that matter (common practice, no source); half of that catches a
  regression before it is likely to be heard, and is still three times the standard error of a
  30-utterance mean measured on the demo (per-utterance difference SD ≈ 0.08 with two seeds a
  side, SE ≈ 0.015; see ``tests/test_gate_power.py``).
* ``stoi``, ``estoi``: **0.01** (1 % of the 0–1 scale). Vocoders are usually told apart by
  0.01–0.05 STOI (common practice, no source); the demo's seed noise on a 30-utterance mean is
  about 0.002.
* ``mcd``, ``mcd_mfcc``: **0.2 dB**. System differences of a few tenths of a dB are commonly
  reported as meaningful (common practice, no source).
* every other directed metric column: **2 % of the baseline mean** (a scale-free fallback).
* RTF: **+10 %** (ratio of medians). Run-to-run timing noise on a quiet machine is a few percent
  (common practice, no source); beyond 10 % a latency budget visibly shrinks.
* minimum **10 paired utterances** per configuration. With n utterances the smallest two-sided
  exact Wilcoxon p-value is 2/2ⁿ (Wilcoxon 1945): 0.0625 for n = 5, so no regression could ever
  be significant; with 10 it is 0.002, leaving room for Holm's correction over a grid. Bootstrap
  intervals also under-cover on very small samples (Efron & Tibshirani 1993, Ch. 14, from memory).
* confidence **0.95** (common practice, no source).

Policy file (TOML)::

    min_items = 10
    confidence = 0.95
    max_rtf_increase_pct = 10
    default_allow_pct = 2          # fallback for columns not listed under [allow]
    [allow]                        # number: in the metric's unit; "N%": of the baseline mean
    pesq_wb = 0.05
    lsd = "3%"
    [bootstrap]                    # see vocobench.stats.BootstrapSettings
    n_resamples = 2000
    seed = 0
    method = "BCa"
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Mapping

from ..errors import InputError
from ..stats import DEFAULT_CONFIDENCE, DEFAULT_METHOD, DEFAULT_N_RESAMPLES, DEFAULT_SEED, BootstrapSettings


@dataclass(frozen=True)
class Allowance:
    """Allowed drop of one metric: ``value`` in the metric's unit, or percent of the baseline mean."""

    value: float
    relative: bool = False

    def margin(self, baseline_mean: float) -> float:
        """The allowed drop in the metric's unit for a configuration with this baseline mean."""
        if not self.relative:
            return float(self.value)
        return abs(float(baseline_mean)) * float(self.value) / 100.0 if math.isfinite(baseline_mean) \
            else math.nan

    def __str__(self) -> str:
        return f"{self.value:g} %" if self.relative else f"{self.value:g}"

    def describe(self) -> Any:
        return f"{self.value:g}%" if self.relative else float(self.value)


DEFAULT_ALLOW: dict[str, Allowance] = {
    "pesq_wb": Allowance(0.05), "pesq_nb": Allowance(0.05),
    "stoi": Allowance(0.01), "estoi": Allowance(0.01),
    "mcd": Allowance(0.2), "mcd_mfcc": Allowance(0.2),
}
DEFAULT_ALLOW_PCT = 2.0
DEFAULT_MAX_RTF_INCREASE_PCT = 10.0
DEFAULT_MIN_ITEMS = 10

TOP_KEYS = {"min_items", "confidence", "max_rtf_increase_pct", "default_allow_pct", "allow",
            "bootstrap"}
BOOTSTRAP_KEYS = {"n_resamples", "seed", "method"}


@dataclass(frozen=True)
class Policy:
    """Thresholds of the regression gate (see the module docstring for the defaults).

    ``allow`` maps metric columns to :class:`Allowance`; given entries override
    :data:`DEFAULT_ALLOW`, the others keep their defaults; unlisted columns get
    ``default_allow_pct`` of the baseline mean.
    """

    allow: Mapping[str, Allowance] = field(default_factory=lambda: dict(DEFAULT_ALLOW))
    default_allow_pct: float = DEFAULT_ALLOW_PCT
    max_rtf_increase_pct: float = DEFAULT_MAX_RTF_INCREASE_PCT
    min_items: int = DEFAULT_MIN_ITEMS
    confidence: float = DEFAULT_CONFIDENCE
    n_resamples: int = DEFAULT_N_RESAMPLES
    seed: int = DEFAULT_SEED
    method: str = DEFAULT_METHOD
    source: str = "default policy"

    def __post_init__(self) -> None:
        object.__setattr__(self, "allow", {**DEFAULT_ALLOW, **dict(self.allow)})
        for name in ("n_resamples", "seed"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int) or v < 0:
                raise InputError("must be a non-negative integer", source=self.source,
                                 field=f"bootstrap.{name}", value=v)
        _check_number(self.confidence, "confidence", self.source)
        self.settings                                   # validates confidence / resamples / method
        _check_number(self.default_allow_pct, "default_allow_pct", self.source, lo=0.0)
        _check_number(self.max_rtf_increase_pct, "max_rtf_increase_pct", self.source, lo=0.0)
        if isinstance(self.min_items, bool) or not isinstance(self.min_items, int) or self.min_items < 2:
            raise InputError("must be an integer ≥ 2", source=self.source, field="min_items",
                             value=self.min_items)

    @property
    def settings(self) -> BootstrapSettings:
        try:
            return BootstrapSettings(self.confidence, self.n_resamples, self.seed, self.method)
        except InputError as e:
            raise InputError(str(e), source=self.source) from None

    @property
    def alpha(self) -> float:
        """Family-wise level of the Holm-adjusted Wilcoxon test: ``1 − confidence``."""
        return 1.0 - float(self.confidence)

    def allowance(self, column: str) -> Allowance:
        return self.allow.get(column, Allowance(self.default_allow_pct, relative=True))

    def updated(self, **changes: Any) -> "Policy":
        """A copy with the given fields changed (``None`` values are ignored)."""
        changes = {k: v for k, v in changes.items() if v is not None}
        if "allow" in changes:
            changes["allow"] = {**self.allow, **changes["allow"]}
        return replace(self, **changes)

    def describe(self) -> dict[str, Any]:
        return {"allow": {k: a.describe() for k, a in sorted(self.allow.items())},
                "default_allow_pct": self.default_allow_pct,
                "max_rtf_increase_pct": self.max_rtf_increase_pct, "min_items": self.min_items,
                "confidence": self.confidence, "bootstrap": self.settings.describe(),
                "source": self.source}


def _check_number(v: Any, name: str, source: str, lo: float | None = None) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise InputError("must be a finite number", source=source, field=name, value=v)
    if lo is not None and v < lo:
        raise InputError(f"must be ≥ {lo:g}", source=source, field=name, value=v)
    return float(v)


def parse_allowance(value: Any, *, source: str, field: str) -> Allowance:
    """A number (metric unit) or a string ``"N%"`` (percent of the baseline mean), never negative."""
    if isinstance(value, str):
        text = value.strip()
        rel = text.endswith("%")
        try:
            num = float(text[:-1] if rel else text)
        except ValueError:
            raise InputError("allowed drop must be a number or 'N%'", source=source, field=field,
                             value=value) from None
    else:
        rel, num = False, value
    num = _check_number(num, field, source, lo=0.0)
    return Allowance(num, relative=rel)


def parse_allow_option(text: str) -> tuple[str, Allowance]:
    """``METRIC=DROP`` from the command line (``--allow pesq_wb=0.1``, ``--allow lsd=3%``)."""
    key, sep, val = str(text).partition("=")
    if not sep or not key.strip():
        raise InputError("expected METRIC=DROP", source="command line", field="--allow", value=text)
    return key.strip(), parse_allowance(val, source="command line", field=f"--allow {key.strip()}")


def load_policy(path: str | Path) -> Policy:
    """Read a policy TOML file (format in the module docstring); unknown keys are errors."""
    path = Path(path)
    src = str(path)
    if not path.is_file():
        raise InputError("policy file not found", source=src)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as e:
        raise InputError(f"malformed TOML: {e}", source=src) from None
    return policy_from_mapping(data, source=src)


def policy_from_mapping(data: Mapping[str, Any], source: str = "policy") -> Policy:
    unknown = sorted(set(data) - TOP_KEYS)
    if unknown:
        raise InputError(f"unknown key; valid: {sorted(TOP_KEYS)}", source=source, field=unknown[0])
    allow = data.get("allow", {})
    if not isinstance(allow, Mapping):
        raise InputError("must be a table", source=source, field="allow", value=allow)
    boot = data.get("bootstrap", {})
    if not isinstance(boot, Mapping):
        raise InputError("must be a table", source=source, field="bootstrap", value=boot)
    bad = sorted(set(boot) - BOOTSTRAP_KEYS)
    if bad:
        raise InputError(f"unknown key; valid: {sorted(BOOTSTRAP_KEYS)}", source=source,
                         field=f"bootstrap.{bad[0]}")
    base = Policy(source=source)
    kw: dict[str, Any] = {"allow": {k: parse_allowance(v, source=source, field=f"allow.{k}")
                                    for k, v in allow.items()}}
    for key in ("default_allow_pct", "max_rtf_increase_pct", "confidence"):
        if key in data:
            kw[key] = _check_number(data[key], key, source)
    if "min_items" in data:
        kw["min_items"] = data["min_items"]
    for key in BOOTSTRAP_KEYS & set(boot):
        kw[key] = boot[key]
    return base.updated(**kw)


def resolve_policy(policy: "Policy | str | Path | Mapping[str, Any] | None") -> Policy:
    """Policy object, TOML path, mapping (file layout) or ``None`` (the default policy)."""
    if policy is None:
        return Policy()
    if isinstance(policy, Policy):
        return policy
    if isinstance(policy, (str, Path)):
        return load_policy(policy)
    if isinstance(policy, Mapping):
        return policy_from_mapping(policy)
    raise InputError("policy must be a Policy, a TOML path or a mapping", field="policy",
                     value=type(policy).__name__)
