"""Options of the decision stage, from a config's ``[decide]`` table (kept in the manifest).

Example (every key optional)::

    [decide]
    reference = "cosine/ddim/200"         # schedule/sampler/steps
    margins = {pesq_wb = 0.1, mcd = 0.5}  # by metric column (`vocobench metrics` lists them)
    rtf_budget = false                    # no RTF ceiling
    listen = ["cosine/ddim/6"]

Keys, types, ranges and defaults are declared once in :data:`DECIDE` (rendered in DEVELOPERS.md,
"Configuration reference"); the bootstrap keys reuse :data:`vocobench.stats.BOOTSTRAP`. A bad value
raises :class:`~vocobench.errors.InputError` naming ``decide.<key>``.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

from ..params import (Boolean, Integer, ListOf, MapOf, OrOff, Param, Real, String, Table,
                      with_defaults)
from ..bootstrap import BOOTSTRAP, BootstrapSettings

DEFAULT_MARGIN_REL = 0.05       # our choice: 5 % of the reference mean, stated in every report
DEFAULT_RTF_BUDGET = 1.0        # real time (RTF = synthesis time / audio duration)
# Our choice, as the gate's (gate/policy.py): with 10 utterances the smallest exact paired p-value
# is 2^-10 ≈ 0.001 (Wilcoxon 1945), and bootstrap bounds under-cover on fewer (Efron &
# Tibshirani 1993, Ch. 14, from memory).
DEFAULT_MIN_ITEMS = 10
DEFAULT_POWER = 0.9             # common practice, 80–90 % (Chow, Shao & Wang 2008, from memory)

_NAMES = ListOf(String(nonempty=True), split=",", as_tuple=True)
DECIDE = Table("decide", [
    Param("reference", String(nonempty=True), None,
          "configuration compared against, as schedule/sampler/steps; unset: most steps "
          "(ties: first in grid)"),
    Param("metrics", _NAMES, None,
          "metric columns checked for non-inferiority; unset: every metric column with values"),
    Param("margins", MapOf(Real(low=0, keep_int=True), "a table of metric = margin"), {},
          "non-inferiority margins, in the metric's unit"),
    Param("margin_rel", Real(0, 1, closed="left", keep_int=True), DEFAULT_MARGIN_REL,
          "margin for a metric not in `margins`: this fraction of |reference mean|"),
    Param("primary", String(nonempty=True), None,
          "metric for the best-within-budget pick; unset: first of `metrics`"),
    Param("rtf_budget", OrOff(Real(low=0, closed="neither", keep_int=True)), DEFAULT_RTF_BUDGET,
          "RTF ceiling for that pick (1.0 = real time); false or \"none\" disables it"),
    Param("listen", dataclasses.replace(_NAMES, nonempty=False), None,
          "configurations on the listening page; unset: reference, recommended ones and the "
          "fewest-step one"),
    Param("listen_limit", Integer(low=0), 20, "utterances on the listening page (0 = all)"),
    BOOTSTRAP["confidence"],
    BOOTSTRAP["n_resamples"].renamed("resamples"),
    BOOTSTRAP["seed"],
    BOOTSTRAP["method"],
    Param("min_items", Integer(low=2), DEFAULT_MIN_ITEMS,
          "fewest utterances for a recommendation (fewer: none is named, and the report says so)"),
    Param("power", Real(0.5, 1, closed="neither"), DEFAULT_POWER,
          "power of the 'utterances needed' figures in the recommendation"),
    Param("worst", Integer(low=0), 3, "worst utterances listed per configuration and metric"),
    Param("plots", Boolean(), True, "write plots"),
    Param("svg", Boolean(), False, "also write the plots as SVG (PNG always; SVG doubles the drawing)"),
    Param("page", Boolean(), True, "write the listening page"),
], doc="Options of the decision stage (`vocobench report`), kept in the run manifest.")


@dataclass(frozen=True)
@with_defaults(DECIDE)
class ReportOptions:
    """Validated options of :func:`vocobench.report.render_report` (table :data:`DECIDE`)."""

    reference: str | None
    metrics: tuple[str, ...] | None
    margins: Mapping[str, float]
    margin_rel: float
    primary: str | None
    rtf_budget: float | None
    listen: tuple[str, ...] | None
    listen_limit: int
    confidence: float
    resamples: int
    seed: int
    method: str
    min_items: int
    power: float
    worst: int
    plots: bool
    svg: bool
    page: bool
    source: str = "[decide]"

    @property
    def settings(self) -> "BootstrapSettings":
        """The bootstrap settings these options ask for."""
        return BootstrapSettings(self.confidence, self.resamples, self.seed, self.method)

    def __post_init__(self) -> None:
        DECIDE.apply(self, self.source)

    @classmethod
    def from_mapping(cls, table: Mapping[str, Any] | None, source: str = "[decide]") -> "ReportOptions":
        """Parse a ``[decide]`` table; unknown keys are errors (a typo must not pass silently)."""
        return cls(source=source, **DECIDE.parse(table or {}, source, defaults=False))

    def replace(self, **changes: Any) -> "ReportOptions":
        """Copy with some options overridden (e.g. by CLI flags); ``None`` values are ignored."""
        changes = {k: v for k, v in changes.items() if v is not None}
        return dataclasses.replace(self, **DECIDE.parse(changes, "command line", defaults=False))

    def margin_for(self, column: str, reference_mean: float) -> tuple[float, str]:
        """Margin for ``column`` and where it came from (``"set"`` or ``"default"``)."""
        if column in self.margins:
            return float(self.margins[column]), "set"
        return abs(float(reference_mean)) * self.margin_rel, "default"


def options_for(run: Any, options: ReportOptions | None) -> ReportOptions:
    """``options``, or else the run's ``[decide]`` table (manifest ``decide``)."""
    if options is not None:
        return options
    return ReportOptions.from_mapping(run.manifest.get("decide"),
                                      source=str(Path(run.path) / "manifest.json"))
