"""``report/recommendation.json``: the recommendation in machine-readable form.

Written by :func:`vocobench.report.render_report` next to ``recommendation.md``; the gate reads
it to know which configuration a release ships (policy ``gated = "recommended"``), and
``vocobench baseline freeze`` copies it into the baseline file. Format
``vocobench-recommendation/1``, one JSON object::

    {"format": "vocobench-recommendation/1",
     "reference": "uniform/ddpm/50",           # the configuration compared against
     "recommended": ["quadratic/ddim/10"],     # configurations named, rule (a) first; [] = none
     "supported": true,                        # false: a rule could not decide for lack of evidence
     "status_text": "",                        # why not, in words (empty when supported)
     "cheapest_within_margins": {"config": "quadratic/ddim/10", "status": "named",
                                 "undecided": {"uniform/ddim/10": 31}},
     "best_within_budget": {"config": null, "status": "tied",
                            "tied": {"quadratic/ddpm/10": 140}},
     "utterances": 18, "utterances_needed": 31,
     "metrics": ["stoi", "logmel_l1"], "margins": {"stoi": 0.01, "logmel_l1": 0.15},
     "primary": "stoi", "rtf_budget": 0.05, "confidence": 0.95, "power": 0.9, "min_items": 10}

Rule (a) status: ``named`` (a cheaper configuration is shown within the margins),
``reference`` (none cheaper is within the margins, even on average: the reference itself is
named), ``insufficient`` (cheaper ones are within on average, but the
test set cannot show it: none named), ``none`` (no configuration without failed items
qualifies), ``withheld`` (too few utterances for any verdict). Rule (b) status: ``named``
(shown better on the primary metric than every other configuration within the budget),
``tied`` (not shown better than those in ``tied``: none named), ``no budget``, ``none``,
``withheld``. ``undecided`` and ``tied`` map a configuration to the utterances that would
settle it (normal approximation at ``power``; ``null`` when no number would);
``utterances_needed`` is the smallest such figure that would let an unsupported rule name a
configuration. Unknown keys are ignored by readers; a new meaning gets a new format version.
"""
from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Mapping

from ..errors import InputError

RECOMMENDATION_FORMAT = "vocobench-recommendation/1"
RECOMMENDATION_FILE = Path("report") / "recommendation.json"


def recommendation_document(decision: Any, opts: Any) -> dict[str, Any]:
    """The document for a :class:`~vocobench.report.decide.Recommendation` (``None``: the run
    had no metric values, nothing is recommended)."""
    if decision is None:
        return {"format": RECOMMENDATION_FORMAT, "reference": None, "recommended": [],
                "supported": False, "status_text": "the run has no metric values",
                "utterances": 0, "utterances_needed": None}
    d = decision
    return {"format": RECOMMENDATION_FORMAT, "reference": d.reference,
            "recommended": d.recommended, "supported": not d.unsupported,
            "status_text": d.unsupported,
            "cheapest_within_margins": {"config": d.cheapest, "status": d.status_a,
                                        "undecided": d.undecided},
            "best_within_budget": {"config": d.best_in_budget, "status": d.status_b,
                                   "tied": d.tied},
            "utterances": d.n_utterances, "utterances_needed": d.needed,
            "metrics": list(d.metrics), "margins": {m: v for m, (v, _) in d.margins.items()},
            "primary": d.primary, "rtf_budget": d.rtf_budget, "confidence": opts.confidence,
            "power": opts.power, "min_items": opts.min_items}


def recommendation_text(decision: Any, opts: Any) -> str:
    return json.dumps(recommendation_document(decision, opts), indent=1,
                      ensure_ascii=False, allow_nan=False) + "\n"


def check_recommendation(doc: Any, source: str) -> dict[str, Any]:
    """Validate a recommendation document (format and ``recommended``); returns it as a dict."""
    if not isinstance(doc, Mapping) or doc.get("format") != RECOMMENDATION_FORMAT:
        raise InputError(f"unsupported recommendation format; expected {RECOMMENDATION_FORMAT}",
                         source=source, field="format",
                         value=doc.get("format") if isinstance(doc, Mapping) else None)
    rec = doc.get("recommended")
    if not isinstance(rec, list) or not all(isinstance(x, str) for x in rec):
        raise InputError("must be a list of schedule/sampler/steps labels", source=source,
                         field="recommended", value=rec)
    return dict(doc)


def read_recommendation(path: str | Path) -> dict[str, Any]:
    """Read and validate ``report/recommendation.json``."""
    try:
        doc = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as e:
        raise InputError(f"cannot read the recommendation: {e}", source=str(path)) from None
    return check_recommendation(doc, str(path))
