"""Options of the decision stage, from a config's ``[decide]`` table (kept in the manifest).

Keys (all optional)::

    [decide]
    reference   = "cosine/ddim/200"   # compared against; default: most steps (ties: first in grid)
    metrics     = ["mcd_db", "pesq_wb"]  # checked for non-inferiority; default: every metric column
    margins     = {pesq_wb = 0.1, mcd_db = 0.5}  # non-inferiority margins, in the metric's unit
    margin_rel  = 0.05      # margin for a metric not in `margins`: this fraction of |reference mean|
    primary     = "pesq_wb" # metric for the best-within-budget pick; default: first of `metrics`
    rtf_budget  = 1.0       # RTF ceiling for that pick (1.0 = real time); false/"none" disables it
    listen      = ["cosine/ddim/6"]  # configurations on the listening page; default: reference,
                            #   recommended ones, fewest-step one
    listen_limit = 20       # utterances on the listening page (0 = all)
    confidence  = 0.95      # intervals and one-sided bounds
    resamples   = 2000      # bootstrap resamples
    seed        = 0         # bootstrap seed (recorded)
    method      = "BCa"     # bootstrap interval: BCa | percentile | basic
    worst       = 3         # worst utterances listed per configuration and metric
    plots       = true      # write plots
    page        = true      # write the listening page

A bad value raises :class:`~vocobench.errors.InputError` naming ``decide.<key>``.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any, Mapping

from ..errors import InputError
from ..stats import DEFAULT_CONFIDENCE, DEFAULT_METHOD, DEFAULT_N_RESAMPLES, DEFAULT_SEED, METHODS

DEFAULT_MARGIN_REL = 0.05       # our choice: 5 % of the reference mean, stated in every report
DEFAULT_RTF_BUDGET = 1.0        # real time (RTF = synthesis time / audio duration)
DEFAULT_LISTEN_LIMIT = 20
DEFAULT_WORST = 3


@dataclass(frozen=True)
class ReportOptions:
    """Validated options of :func:`vocobench.report.render_report` (see module docstring)."""

    reference: str | None = None
    metrics: tuple[str, ...] | None = None
    margins: Mapping[str, float] = field(default_factory=dict)
    margin_rel: float = DEFAULT_MARGIN_REL
    primary: str | None = None
    rtf_budget: float | None = DEFAULT_RTF_BUDGET
    listen: tuple[str, ...] | None = None
    listen_limit: int = DEFAULT_LISTEN_LIMIT
    confidence: float = DEFAULT_CONFIDENCE
    resamples: int = DEFAULT_N_RESAMPLES
    seed: int = DEFAULT_SEED
    method: str = DEFAULT_METHOD
    worst: int = DEFAULT_WORST
    plots: bool = True
    page: bool = True
    source: str = "[decide]"

    def __post_init__(self) -> None:
        _validate(self)

    @classmethod
    def from_mapping(cls, table: Mapping[str, Any] | None, source: str = "[decide]") -> "ReportOptions":
        """Parse a ``[decide]`` table; unknown keys are errors (a typo must not pass silently)."""
        table = dict(table or {})
        names = {f.name for f in dataclasses.fields(cls)} - {"source"}
        for key in table:
            if key not in names:
                raise InputError(f"unknown key; valid: {', '.join(sorted(names))}", source=source,
                                 field=f"decide.{key}", value=key)
        kw: dict[str, Any] = {"source": source}
        for key, value in table.items():
            kw[key] = _coerce(key, value, source)
        return cls(**kw)

    def replace(self, **changes: Any) -> "ReportOptions":
        """Copy with some options overridden (e.g. by CLI flags); ``None`` values are ignored."""
        kw = {k: _coerce(k, v, "command line") for k, v in changes.items() if v is not None}
        return dataclasses.replace(self, **kw)

    def margin_for(self, column: str, reference_mean: float) -> tuple[float, str]:
        """Margin for ``column`` and where it came from (``"set"`` or ``"default"``)."""
        if column in self.margins:
            return float(self.margins[column]), "set"
        return abs(float(reference_mean)) * self.margin_rel, "default"


def _coerce(key: str, value: Any, source: str) -> Any:
    """Turn TOML/CLI values into the dataclass types; type errors name the field."""
    f = f"decide.{key}"

    def bad(msg: str) -> InputError:
        return InputError(msg, source=source, field=f, value=value)

    if key in ("metrics", "listen"):
        if isinstance(value, str):
            value = [v.strip() for v in value.split(",") if v.strip()]
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) and v for v in value):
            raise bad("expected a list of names")
        return tuple(value)
    if key == "margins":
        if not isinstance(value, Mapping):
            raise bad("expected a table of metric = margin")
        return {str(k): v for k, v in value.items()}
    if key == "rtf_budget" and (value is False or (isinstance(value, str) and value.lower() == "none")):
        return None
    if key in ("plots", "page"):
        if not isinstance(value, bool):
            raise bad("expected true or false")
        return value
    return value


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _validate(o: ReportOptions) -> None:
    def bad(key: str, msg: str, value: Any) -> InputError:
        return InputError(msg, source=o.source, field=f"decide.{key}", value=value)

    for key in ("reference", "primary"):
        v = getattr(o, key)
        if v is not None and (not isinstance(v, str) or not v):
            raise bad(key, "expected a non-empty string", v)
    for key in ("metrics", "listen"):
        v = getattr(o, key)
        if v is not None and (not isinstance(v, tuple) or not all(isinstance(s, str) and s for s in v)):
            raise bad(key, "expected a list of names", v)
    if o.metrics is not None and not o.metrics:
        raise bad("metrics", "list must not be empty", list(o.metrics))
    if not isinstance(o.margins, Mapping):
        raise bad("margins", "expected a table of metric = margin", o.margins)
    for k, v in o.margins.items():
        if not _number(v) or v < 0:
            raise InputError("margin must be a finite number ≥ 0", source=o.source,
                             field=f"decide.margins.{k}", value=v)
    if not _number(o.margin_rel) or not (0 <= o.margin_rel < 1):
        raise bad("margin_rel", "expected a fraction in [0, 1)", o.margin_rel)
    if o.rtf_budget is not None and (not _number(o.rtf_budget) or o.rtf_budget <= 0):
        raise bad("rtf_budget", "expected a positive number (or false for none)", o.rtf_budget)
    if not _number(o.confidence) or not (0.5 <= o.confidence < 1):
        raise bad("confidence", "expected a number in [0.5, 1)", o.confidence)
    for key, low in (("resamples", 100), ("listen_limit", 0), ("worst", 0), ("seed", 0)):
        v = getattr(o, key)
        if not isinstance(v, int) or isinstance(v, bool) or v < low:
            raise bad(key, f"expected an integer ≥ {low}", v)
    if o.method not in METHODS:
        raise bad("method", f"expected one of {', '.join(METHODS)}", o.method)
    for key in ("plots", "page"):
        if not isinstance(getattr(o, key), bool):
            raise bad(key, "expected true or false", getattr(o, key))
