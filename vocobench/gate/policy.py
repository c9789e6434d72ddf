"""Gate policy: how much worse a candidate may be, which configurations decide, what is accepted.

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
* minimum **10 paired utterances** per gated configuration; fewer, and the comparison is refused
  before any statistic (exit 2, :mod:`vocobench.gate.gating`). With n utterances the smallest
  one-sided p-value of an exact paired test is 2⁻ⁿ (Wilcoxon 1945): 0.03 for n = 5, no room for
  a correction over several tests; with 10 it is 0.001, room for Holm's correction over about
  50. Bootstrap bounds also under-cover on very small samples (Efron & Tibshirani 1993, Ch. 14,
  from memory). More gated tests raise the minimum to ⌈log₂(m/α)⌉.
* confidence **0.95** (common practice, no source): each gated (configuration, metric) cell is
  shown no worse at one-sided level 0.05, and the family of gated cells is shown worse with a
  family-wise error of at most 0.05 (decision rule: :mod:`vocobench.gate.verdict`).
* **gated = "recommended"**: the baseline's recorded recommendation (``report/recommendation.json``
  of a run directory, or the copy a frozen baseline carries), else every configuration. A release
  ships one operating point; gating only it keeps the multiplicity correction small, so a real
  drop there is found with far fewer utterances. The other configurations are still compared,
  as information.
* **accept_inconclusive = false**: an inconclusive comparison (neither shown no worse nor shown
  worse) exits 3, never 0; a team may accept it explicitly, and the verdict then says so.
* power **0.9** (common practice: 80–90 %, e.g. Chow, Shao & Wang 2008, from memory) for the
  stated resolution ("the smallest drop this test can show") and for ``vocobench plan-size``.

Policy file (TOML; every key optional, defaults and ranges in :data:`POLICY`, rendered in
DEVELOPERS.md)::

    min_items = 12
    max_rtf_increase_pct = 5
    gated = ["quadratic/ddim/10"]  # or "recommended" (default) or "all"
    accept_inconclusive = true     # exit 0 on an inconclusive comparison, said in the verdict
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
from ..keys import ConfigKey
from ..params import (Boolean, Custom, Integer, MapOf, Param, Real, Table, check, is_number,
                      read_toml, with_defaults)
from ..bootstrap import BOOTSTRAP, BootstrapSettings


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


GATED_WORDS = ("recommended", "all")


def _gated(value: Any) -> "str | tuple[str, ...]":
    """``"recommended"``, ``"all"`` or a non-empty list of ``schedule/sampler/steps`` labels."""
    if isinstance(value, str) and value in GATED_WORDS:
        return value
    items = [value] if isinstance(value, str) else value
    if not isinstance(items, (list, tuple)) or not items:
        raise ValueError("must be 'recommended', 'all' or a list of schedule/sampler/steps labels")
    out = []
    for v in items:
        parts = str(v).rsplit("/", 2) if isinstance(v, str) else []
        if len(parts) != 3 or not parts[0] or not parts[1] or not parts[2].isdigit():
            raise ValueError(f"not a configuration label schedule/sampler/steps: {v!r}")
        out.append(ConfigKey.parse(v).label)
    return tuple(dict.fromkeys(out))


DEFAULT_ALLOW: dict[str, Allowance] = {
    "pesq_wb": Allowance(0.05), "pesq_nb": Allowance(0.05),
    "stoi": Allowance(0.01), "estoi": Allowance(0.01),
    "mcd": Allowance(0.2), "mcd_mfcc": Allowance(0.2),
}
GATED = Custom("'recommended', 'all' or a list of schedule/sampler/steps labels", _gated,
               "string or list")
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
    Param("gated", GATED, "recommended",
          "configurations whose verdict decides: 'recommended' (the baseline's recorded "
          "recommendation, else all), 'all', or a list of schedule/sampler/steps labels"),
    Param("accept_inconclusive", Boolean(), False,
          "exit 0 on an inconclusive comparison (the verdict then says it was accepted)"),
    Param("power", Real(0.5, 1, closed="neither"), 0.9,
          "power of the stated resolution (smallest drop shown) and of plan-size"),
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
    gated: "str | tuple[str, ...]"
    accept_inconclusive: bool
    power: float
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
        """``1 − confidence``: the one-sided level of each non-inferiority test and the
        family-wise level of the Holm-adjusted regression tests."""
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
                "confidence": self.confidence,
                "gated": self.gated if isinstance(self.gated, str) else list(self.gated),
                "accept_inconclusive": self.accept_inconclusive, "power": self.power,
                "bootstrap": self.settings.describe(), "source": self.source}


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
