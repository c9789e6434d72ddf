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

Policy file (TOML; every key optional, defaults and ranges in :data:`POLICY`, rendered in
DEVELOPERS.md)::

    min_items = 12
    max_rtf_increase_pct = 5
    [allow]                        # number: in the metric's unit; "N%": of the baseline mean
    pesq_wb = 0.1
    lsd = "3%"
    [bootstrap]                    # vocobench.stats.BOOTSTRAP, less `confidence` (top level here)
    n_resamples = 5000
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Mapping

from ..errors import InputError
from ..params import (Custom, Integer, MapOf, Param, Real, Table, check, is_number, read_toml,
                      with_defaults)
from ..stats import BOOTSTRAP, BootstrapSettings


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


def _allowance(value: Any) -> Allowance:
    """A number (metric unit) or a string ``"N%"`` (percent of the baseline mean), never negative."""
    if isinstance(value, Allowance):
        return value
    rel, num = False, value
    if isinstance(value, str):
        text = value.strip()
        rel = text.endswith("%")
        try:
            num = float(text[:-1] if rel else text)
        except ValueError:
            raise ValueError("allowed drop must be a number or 'N%'") from None
    if not is_number(num) or not math.isfinite(num) or num < 0:
        raise ValueError("allowed drop must be a finite number ≥ 0 or 'N%'")
    return Allowance(float(num), relative=rel)


DEFAULT_ALLOW: dict[str, Allowance] = {
    "pesq_wb": Allowance(0.05), "pesq_nb": Allowance(0.05),
    "stoi": Allowance(0.01), "estoi": Allowance(0.01),
    "mcd": Allowance(0.2), "mcd_mfcc": Allowance(0.2),
}
ALLOWANCE = Custom("a number ≥ 0 (metric unit) or 'N%' (of the baseline mean)", _allowance,
                   "number or string")
POLICY_BOOTSTRAP = BOOTSTRAP.subset("n_resamples", "seed", "method")
POLICY = Table("", [
    Param("min_items", Integer(low=2), 10, "fewest paired utterances for a verdict"),
    BOOTSTRAP["confidence"],
    Param("max_rtf_increase_pct", Real(low=0), 10.0, "allowed RTF increase (ratio of medians), %"),
    Param("default_allow_pct", Real(low=0), 2.0,
          "allowed drop of a column not in `allow`, % of the baseline mean"),
    Param("allow", MapOf(ALLOWANCE, "a table of metric = allowed drop"), {},
          "allowed mean drop per metric column; overrides the built-in ones (see gate/policy.py)"),
    Param("bootstrap", POLICY_BOOTSTRAP, doc="bootstrap settings"),
], title="Gate policy file (`vocobench compare --policy FILE`)")


@dataclass(frozen=True)
@with_defaults(POLICY, POLICY_BOOTSTRAP)
class Policy:
    """Thresholds of the regression gate (see the module docstring for the defaults).

    ``allow`` maps metric columns to :class:`Allowance`; given entries override
    :data:`DEFAULT_ALLOW`, the others keep their defaults; unlisted columns get
    ``default_allow_pct`` of the baseline mean.
    """

    allow: Mapping[str, Allowance]
    default_allow_pct: float
    max_rtf_increase_pct: float
    min_items: int
    confidence: float
    n_resamples: int                  # n_resamples, seed, method: the file's [bootstrap] table
    seed: int
    method: str
    source: str = "default policy"

    def __post_init__(self) -> None:
        object.__setattr__(self, "allow", {**DEFAULT_ALLOW, **dict(self.allow)})
        POLICY.apply(self, self.source)
        POLICY_BOOTSTRAP.apply(self, self.source)

    @property
    def settings(self) -> BootstrapSettings:
        return BootstrapSettings(self.confidence, self.n_resamples, self.seed, self.method)

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


def parse_allowance(value: Any, *, source: str, field: str) -> Allowance:
    """A number (metric unit) or a string ``"N%"`` (percent of the baseline mean), never negative."""
    return check(value, ALLOWANCE, field=field, source=source)


def parse_allow_option(text: str) -> tuple[str, Allowance]:
    """``METRIC=DROP`` from the command line (``--allow pesq_wb=0.1``, ``--allow lsd=3%``)."""
    key, sep, val = str(text).partition("=")
    if not sep or not key.strip():
        raise InputError("expected METRIC=DROP", source="command line", field="--allow", value=text)
    return key.strip(), parse_allowance(val, source="command line", field=f"--allow {key.strip()}")


def load_policy(path: str | Path) -> Policy:
    """Read a policy TOML file (format in the module docstring); unknown keys are errors."""
    return policy_from_mapping(read_toml(path, "policy"), source=str(path))


def policy_from_mapping(data: Mapping[str, Any], source: str = "policy") -> Policy:
    kw = POLICY.parse(data, source, defaults=False)
    return Policy(source=source, **kw.pop("bootstrap"), **kw)


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
