"""The recommendation: plain words with the numbers behind them.

(a) Cheapest configuration no worse than the reference: the lowest median RTF among the
    configurations whose one-sided bound (at the chosen confidence) of the paired difference to
    the reference lies inside the margin on every chosen metric, direction-aware — the lower
    bound above ``−margin`` where higher is better, the upper bound below ``+margin`` where lower
    is better. This is the confidence-interval form of a non-inferiority test (e.g. Wellek 2010,
    "Testing Statistical Hypotheses of Equivalence and Noninferiority", 2nd ed.). The bounds are
    per configuration, not adjusted for the number of configurations screened.
(b) Best configuration within an RTF budget on a primary metric: the best mean among those with
    median RTF ≤ budget.

A configuration with failed items is never recommended. Ties in cost go to fewer NFE, then to
grid order; ties in quality go to lower median RTF.

Honesty (:mod:`vocobench.report.support`): no winner is named when the evidence cannot support
one, and the text says so with the utterances that would. Neither rule names a configuration
when the test set has fewer than ``min_items`` utterances or too few for any exact paired test
to reach the level. Rule (a) names none when no cheaper configuration is shown within the
margins but some are within them on average ("insufficient"; cheaper ones left undecided next to
a named winner are listed too). Rule (b) names none when the best mean is not shown better, on
the primary metric, than every other configuration within the budget ("tied"). The outcome is
also written as ``report/recommendation.json`` (:mod:`vocobench.report.recommendation`), and the
recommended rows are marked in the table (column ``recommended``).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import pandas as pd

from ..stats import RunStatistics, within_margin
from ..textfmt import fmt, fmt_p, interval
from .options import ReportOptions
from .support import smallest, ties, too_few, undecided

ROLE_A, ROLE_B = "(a) cheapest within the margins", "(b) best within the RTF budget"

CAUTION = ("Objective scores are no substitute for listening tests: listen to the outputs "
           "(listening page) before deciding.")


@dataclass
class Recommendation:
    """Outcome of the decision rules; ``text`` is the plain-words version."""

    reference: str
    metrics: list[str]
    margins: dict[str, tuple[float, str]]
    checks: pd.DataFrame                 # config × metric: bound, margin, passed
    cheapest: str | None
    primary: str | None
    rtf_budget: float | None
    best_in_budget: str | None
    excluded: dict[str, int] = field(default_factory=dict)   # config → failed items
    status_a: str = "named"              # see vocobench.report.recommendation
    status_b: str = "named"
    undecided: dict[str, int | None] = field(default_factory=dict)   # config → utterances needed
    tied: dict[str, int | None] = field(default_factory=dict)        # config → utterances needed
    unsupported: str = ""                # why no configuration could be named ("" if one was)
    leader: str | None = None            # best mean within the budget, named or not
    n_utterances: int = 0
    needed: int | None = None            # utterances that would let an unsupported rule name one
    text: str = ""

    @property
    def recommended(self) -> list[str]:
        return list(dict.fromkeys(c for c in (self.cheapest, self.best_in_budget) if c))

    def roles(self) -> dict[str, str]:
        """Configuration → its role(s), for the table's ``recommended`` column."""
        out: dict[str, list[str]] = {}
        for c, role in ((self.cheapest, ROLE_A), (self.best_in_budget, ROLE_B)):
            if c:
                out.setdefault(c, []).append(role)
        return {c: "; ".join(r) for c, r in out.items()}


def _unit(st: RunStatistics, col: str) -> str:
    u = st.columns[col].get("unit")
    return f" {u}" if u else ""


def recommend(st: RunStatistics, table: pd.DataFrame, opts: ReportOptions) -> Recommendation:
    """Apply rules (a) and (b) of the module docstring to a built table; adds the table's
    ``recommended`` column (role text, empty for rows not recommended)."""
    metrics = list(opts.metrics or st.columns)
    primary = opts.primary or metrics[0]
    ref = st.reference.label
    t = table.set_index("config")
    order = {c: i for i, c in enumerate(t.index)}
    margins = {m: opts.margin_for(m, t.loc[ref, f"{m}_mean"]) for m in metrics}
    checks, passed = [], {}
    for c in t.index:
        ok_all = True
        for m in metrics:
            hib = bool(st.columns[m]["higher_is_better"])
            margin = margins[m][0]
            if c == ref:
                bound, ok = 0.0, math.isfinite(float(t.loc[c, f"{m}_mean"]))
            else:
                bound = float(t.loc[c, f"{m}_diff_bound"])
                ok = within_margin(bound, margin, hib)
            checks.append({"config": c, "column": m, "bound": bound, "margin": margin, "passed": ok})
            ok_all &= ok
        passed[c] = ok_all
    excluded = {c: int(t.loc[c, "failed"]) for c in t.index if t.loc[c, "failed"] > 0}

    def cost(c: str) -> tuple[float, int, int]:
        r = float(t.loc[c, "rtf_median"])
        return (r if math.isfinite(r) else math.inf, int(t.loc[c, "nfe"]), order[c])

    cands = [c for c in t.index if passed[c] and c not in excluded]
    cheapest = min(cands, key=cost) if cands else None

    best = None
    hib_p = bool(st.columns[primary]["higher_is_better"])
    within: list[str] = []
    if opts.rtf_budget is not None:
        within = [c for c in t.index if c not in excluded
                  and float(t.loc[c, "rtf_median"]) <= opts.rtf_budget
                  and math.isfinite(float(t.loc[c, f"{primary}_mean"]))]
        if within:
            best = min(within, key=lambda c: ((-1 if hib_p else 1) * float(t.loc[c, f"{primary}_mean"]),)
                       + cost(c))
    rec = Recommendation(reference=ref, metrics=metrics, margins=margins,
                         checks=pd.DataFrame(checks), cheapest=cheapest, primary=primary,
                         rtf_budget=opts.rtf_budget, best_in_budget=best, excluded=excluded)
    _weigh(rec, st, t, opts, cost, within, passed)
    rec.text = _words(st, t, rec, opts)
    roles = rec.roles()
    table["recommended"] = [roles.get(c, "") for c in table["config"]]
    return rec


def utterance_count(t: pd.DataFrame, ref: str, metrics: list[str]) -> int:
    """Utterances with a value of the reference (the most over the decision's metrics)."""
    return int(max(t.loc[ref, f"{m}_n"] for m in metrics))


def _weigh(rec: Recommendation, st: RunStatistics, t: pd.DataFrame, opts: ReportOptions,
           cost: Callable[[str], tuple], within: list[str], passed: dict[str, bool]) -> None:
    """Withdraw names the evidence cannot support (module docstring, "Honesty")."""
    ref = rec.reference
    n = rec.n_utterances = utterance_count(t, ref, rec.metrics)
    if rec.rtf_budget is None:
        rec.status_b = "no budget"
    elif rec.best_in_budget is None:
        rec.status_b = "none"
    cheaper = [c for c in t.index if c != ref and c not in rec.excluded and not passed[c]
               and (rec.cheapest is None or cost(c) < cost(rec.cheapest))]
    rec.undecided = undecided(st, cheaper, rec.margins, opts)
    reason = too_few(n, opts)
    if reason:
        rec.status_a = "withheld"
        rec.status_b = "withheld" if rec.best_in_budget else rec.status_b
        rec.cheapest = rec.best_in_budget = None
        rec.unsupported = f"no recommendation: {reason}"
        rec.needed = max(smallest(rec.undecided) or 0, opts.min_items)
        return
    if rec.cheapest is None:
        rec.status_a = "none"
    elif rec.cheapest == ref and rec.undecided:
        rec.status_a = "insufficient"
        rec.cheapest = None
    elif rec.cheapest == ref:
        rec.status_a = "reference"
    if rec.best_in_budget is not None:
        rec.leader = rec.best_in_budget
        rec.tied = ties(st, rec.best_in_budget, within, rec.primary, opts)
        if rec.tied:
            rec.status_b = "tied"
            rec.best_in_budget = None
    why = []
    if rec.status_a == "insufficient":
        why.append(f"no cheaper configuration can be shown within the margins with {n} utterances")
    if rec.status_b == "tied":
        why.append(f"the best {rec.primary} within the budget is not shown better than "
                   + ", ".join(rec.tied))
    rec.unsupported = "; ".join(why)
    open_needs = {**(rec.undecided if rec.status_a == "insufficient" else {}),
                  **(rec.tied if rec.status_b == "tied" else {})}
    rec.needed = smallest(open_needs)


def _how(how: str, opts: ReportOptions) -> str:
    return "set" if how == "set" else f"default: {100 * opts.margin_rel:g} % of the reference mean"


def _words(st: RunStatistics, t: pd.DataFrame, rec: Recommendation, opts: ReportOptions) -> str:
    s = st.settings
    conf = f"{100 * s.confidence:g} %"
    ref = rec.reference
    n_utt = utterance_count(t, ref, rec.metrics)
    lines = [f"Reference configuration: {ref}"
             + (" (most steps)" if opts.reference is None else " (chosen)")
             + f", median RTF {fmt(t.loc[ref, 'rtf_median'], 3)}.",
             f"Intervals: bootstrap ({s.method}, {s.n_resamples} resamples, seed {s.seed}) over "
             f"{n_utt} utterances, seeds averaged within each utterance; {conf} two-sided "
             f"intervals, {conf} one-sided bounds for non-inferiority.",
             "Margins: " + "; ".join(f"{m} {fmt(v, 3)}{_unit(st, m)} ({_how(how, opts)})"
                                     for m, (v, how) in rec.margins.items()) + ".", ""]
    if not any(math.isfinite(float(x)) for x in t["rtf_median"]):
        lines += ["No latency was measured: costs fall back to NFE.", ""]
    if rec.status_a == "withheld":
        lines += [f"No recommendation: {rec.unsupported[len('no recommendation: '):]}. With so few "
                  "utterances no configuration can be shown within the margins or better than "
                  "another, so none is named.", f"    About {rec.needed} utterances would be needed"
                  + (" (normal approximation at the observed spread; Chow, Shao & Wang 2008)."
                     if rec.undecided else ".")]
    else:
        lines += _rule_a(st, t, rec, conf) + _rule_b(st, t, rec, conf)
    if rec.excluded:
        lines += ["", "Never recommended because some items failed: "
                  + ", ".join(f"{c} ({n} failed)" for c, n in rec.excluded.items()) + "."]
    sweep = [c for c in t.index if t.loc[c, "latency_source"] == "sweep"]
    if sweep:
        lines.append("Latency from the sweep's own timings (possibly contended) for: "
                     + ", ".join(sweep) + ".")
    lines += ["", CAUTION]
    return "\n".join(lines) + "\n"


def _needs(needs: dict[str, int | None]) -> str:
    return "; ".join(f"{c} (about {n} utterances would settle it)" if n else
                     f"{c} (no number of utterances would settle it)" for c, n in needs.items())


def _rule_a(st: RunStatistics, t: pd.DataFrame, rec: Recommendation, conf: str) -> list[str]:
    ref, c = rec.reference, rec.cheapest
    n = utterance_count(t, ref, rec.metrics)
    if rec.status_a == "none":
        return ["(a) No configuration without failures is non-inferior to the reference on "
                + ", ".join(rec.metrics) + " within the margins."]
    if rec.status_a == "insufficient":
        return [f"(a) Not decided: with {n} utterances no cheaper configuration can be shown within "
                f"the margins. These are inside them on average but not by their one-sided {conf} "
                f"bounds: {_needs(rec.undecided)}. Until then keep the reference, {ref}."]
    head = f"(a) Cheapest configuration no worse than the reference: {c}"
    lines = []
    if c == ref:
        head += " — the reference itself; no cheaper configuration stays within the margins."
    else:
        speed = float(t.loc[ref, "rtf_median"]) / float(t.loc[c, "rtf_median"]) \
            if float(t.loc[c, "rtf_median"]) > 0 else math.nan
        head += (f" — median RTF {fmt(t.loc[c, 'rtf_median'], 3)} against "
                 f"{fmt(t.loc[ref, 'rtf_median'], 3)}"
                 + (f" ({speed:.3g}× faster)" if math.isfinite(speed) else "")
                 + f", NFE {int(t.loc[c, 'nfe'])} against {int(t.loc[ref, 'nfe'])}.")
        for m in rec.metrics:
            hib = bool(st.columns[m]["higher_is_better"])
            margin = rec.margins[m][0]
            side, rel = ("lower", "above") if hib else ("upper", "below")
            lim = -margin if hib else margin
            r = t.loc[c]
            diff = interval(r[m + "_diff"], r[m + "_diff_low"], r[m + "_diff_high"], sign=True, sig=3)
            lines.append(f"    {m}: difference {diff}{_unit(st, m)}; one-sided {conf} {side} bound "
                         f"{fmt(r[m + '_diff_bound'], 3, sign=True)}, {rel} the margin {fmt(lim, 3, sign=True)}"
                         f"; Holm-adjusted Wilcoxon p {fmt_p(r[m + '_p_holm'])}.")
    cheaper_fail = [x for x in t.index if x not in rec.excluded and x != c and x not in rec.undecided
                    and float(t.loc[x, "rtf_median"]) < float(t.loc[c, "rtf_median"])]
    if cheaper_fail:
        ch = rec.checks.set_index(["config", "column"])
        why = []
        for x in cheaper_fail[:4]:
            bad = [m for m in rec.metrics if not ch.loc[(x, m), "passed"]]
            parts = [m + " bound " + fmt(ch.loc[(x, m), "bound"], 3, sign=True) for m in bad]
            why.append(f"{x} ({', '.join(parts)})")
        lines.append("    Cheaper but outside the margins: " + "; ".join(why)
                     + (" …" if len(cheaper_fail) > 4 else "") + ".")
    if rec.undecided:
        lines.append(f"    Cheaper, inside the margins on average but not shown with {n} utterances: "
                     + _needs(rec.undecided) + ".")
    return [head] + lines


def _rule_b(st: RunStatistics, t: pd.DataFrame, rec: Recommendation, conf: str) -> list[str]:
    p, ref = rec.primary, rec.reference
    if rec.status_b == "no budget":
        return ["(b) No RTF budget set; set decide.rtf_budget for the best configuration within it."]
    if rec.status_b == "none":
        return [f"(b) No configuration without failures has median RTF ≤ {fmt(rec.rtf_budget, 3)}."]
    b = rec.best_in_budget or rec.leader
    word = "highest" if st.columns[p]["higher_is_better"] else "lowest"
    r = t.loc[b]
    mean = interval(r[p + "_mean"], r[p + "_ci_low"], r[p + "_ci_high"])
    if rec.status_b == "tied":
        return [f"(b) Best {p} within RTF ≤ {fmt(rec.rtf_budget, 3)}: not decided — {b} has the "
                f"{word} mean ({p} {mean}{_unit(st, p)}) but is not shown better, one-sided "
                f"{conf}, than: {_needs(rec.tied)}."]
    line = (f"(b) Best {p} within RTF ≤ {fmt(rec.rtf_budget, 3)} ({word} mean, shown better than "
            f"the others within it): {b} — {p} {mean}{_unit(st, p)}, median RTF "
            f"{fmt(r['rtf_median'], 3)}")
    if b != ref:
        diff = interval(r[p + "_diff"], r[p + "_diff_low"], r[p + "_diff_high"], sign=True, sig=3)
        line += (f"; difference from the reference {diff}"
                 f" (Holm-adjusted Wilcoxon p {fmt_p(r[p + '_p_holm'])})")
    return [line + "."]
