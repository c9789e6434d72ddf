"""The report's recommendation refuses to name a winner the evidence cannot support, says so with
the utterances that would, writes report/recommendation.json and marks the recommended rows.

Inputs are hand-built runs (tests/test_report_fixture.py, tests/run_fixture.py); the rule is the
one documented in vocobench/report/decide.py (our contract); sample sizes are checked against
the normal-approximation formula with scipy.stats.norm (Chow, Shao & Wang 2008, §3.1).
"""
from __future__ import annotations

import re

import json
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats as sst

sys.path.insert(0, str(Path(__file__).resolve().parent))

from run_fixture import seeded, write_run  # noqa: E402
from test_report_fixture import make_run  # noqa: E402
from vocobench.report import ReportOptions, render_report  # noqa: E402

FAST = dict(resamples=500, plots=False, page=False)
REF, X, Y = "u/ddim/50", "u/ddim/10", "u/ddim/2"
N = 12
K = np.arange(N)
ALT = np.where(K % 2 == 0, 1.0, -1.0)


def _json(run: Path) -> dict:
    return json.loads((run / "report" / "recommendation.json").read_text())


def test_four_utterances_support_no_recommendation_at_the_defaults(tmp_path):
    # 4 < decide.min_items (10), and 2^-4 = 0.0625 > α = 0.05: no paired test on 4 utterances
    # can reach the 95 % level (exact Wilcoxon minimum, Wilcoxon 1945).
    run = make_run(tmp_path)
    res = render_report(run, ReportOptions(**FAST, margins={"mcd_db": 0.5, "pesq_wb": 0.1},
                                           rtf_budget=0.35, primary="pesq_wb"), echo=False)
    d = res.decision
    assert d.cheapest is None and d.best_in_budget is None and d.recommended == []
    assert d.status_a == "withheld" and d.status_b == "withheld"
    text = res.recommendation
    assert "No recommendation: 4 utterances are fewer than decide.min_items = 10" in text
    assert "2^-4 = 0.0625 > 0.05" in text and "About 10 utterances would be needed" in text
    doc = _json(run)
    assert doc["format"] == "vocobench-recommendation/1" and doc["recommended"] == []
    assert doc["supported"] is False and doc["utterances"] == 4 and doc["utterances_needed"] == 10
    assert (res.table["recommended"] == "").all()
    assert "◀" not in (run / "report" / "table.md").read_text()


def _run(tmp_path, x_offset, rtf=None, decide=None, y_offset=-0.05):
    stoi = 0.8 + 0.01 * K
    scores = {Y: {"stoi": seeded(stoi + y_offset, spread=0.001)},
              X: {"stoi": seeded(stoi + x_offset, spread=0.001)},
              REF: {"stoi": seeded(stoi, spread=0.001)}}
    return write_run(tmp_path, "run", scores, rtf=rtf, decide=decide)


def test_cheaper_configuration_inside_on_average_but_not_shown_is_not_named(tmp_path):
    # X: per-utterance STOI differences −0.002 ± 0.05 (alternating): the mean drop 0.002 is
    # inside the 0.01 margin, but the one-sided 95 % bound (≈ 0.002 + 1.645·0.052/√12 ≈ 0.027)
    # is not. Y: −0.05 on every utterance, outside on average. Only the reference passes, so
    # rule (a) has no supported answer.
    d = -0.002 + 0.05 * ALT
    run = _run(tmp_path, d)
    res = render_report(run, ReportOptions(**FAST, metrics=("stoi",), margins={"stoi": 0.01},
                                           rtf_budget=False), echo=False)
    dec = res.decision
    assert dec.status_a == "insufficient" and dec.cheapest is None and dec.recommended == []
    sd = float(np.std(d, ddof=1))
    n = math.ceil(((sst.norm.ppf(0.95) + sst.norm.ppf(0.9)) * sd / (0.01 - 0.002)) ** 2)
    assert dec.undecided == {X: n} and dec.needed == n and n > N
    assert "(a) Not decided: with 12 utterances no cheaper configuration can be shown" in res.recommendation
    assert f"{X} (about {n} utterances would settle it)" in res.recommendation
    assert "Until then keep the reference, u/ddim/50" in res.recommendation
    doc = _json(run)
    assert doc["cheapest_within_margins"] == {"config": None, "status": "insufficient",
                                              "undecided": {X: n}}
    assert doc["supported"] is False and doc["recommended"] == []


def test_best_within_budget_is_named_only_when_shown_better(tmp_path):
    # RTF: Y 0.01, X 0.02 (both within the 0.05 budget), reference 0.1. STOI: X is 0.01 above Y
    # on every utterance (shown better); then X is 0.0005 ± 0.02 above Y (a tie).
    rtf = {Y: 0.01, X: 0.02, REF: 0.1}
    opts = ReportOptions(**FAST, metrics=("stoi",), margins={"stoi": 0.1}, primary="stoi",
                         rtf_budget=0.05)
    named = _run(tmp_path / "a", -0.04, rtf=rtf)
    res = render_report(named, opts, echo=False)
    assert res.decision.best_in_budget == X and res.decision.status_b == "named"
    assert "shown better than the others within it" in res.recommendation
    t = res.table.set_index("config")
    assert t.loc[X, "recommended"] == "(b) best within the RTF budget"
    assert t.loc[Y, "recommended"] == "(a) cheapest within the margins"
    csv = pd.read_csv(named / "report" / "table.csv").set_index("config")
    assert csv.loc[X, "recommended"] == "(b) best within the RTF budget"
    md = (named / "report" / "table.md").read_text()
    assert "| Recommended |" in md and "◀ (b) best" in md
    assert _json(named)["recommended"] == [Y, X]

    tied = _run(tmp_path / "b", -0.05 + 0.0005 + 0.02 * ALT, rtf=rtf)
    res = render_report(tied, opts, echo=False)
    dec = res.decision
    assert dec.best_in_budget is None and dec.status_b == "tied" and dec.leader == X
    assert list(dec.tied) == [Y]
    assert "not decided" in res.recommendation and "is not shown better" in res.recommendation
    assert _json(tied)["best_within_budget"]["status"] == "tied"


def test_terminal_table_marks_the_recommended_row(tmp_path, capsys):
    run = _run(tmp_path, -0.04, rtf={Y: 0.01, X: 0.02, REF: 0.1})
    render_report(run, ReportOptions(**FAST, metrics=("stoi",), margins={"stoi": 0.1},
                                     rtf_budget=0.05), echo=True)
    out = capsys.readouterr().out
    lines = out.splitlines()
    # the terminal view (report/terminal.py) marks the row with ★ and names its role in the legend
    assert any(re.match(rf"^★\s+{re.escape(X)}\s", x) for x in lines), out
    flat = " ".join(out.split())
    legend = flat[flat.index("★ recommended:"):]
    assert f"{X} (best stoi within the RTF budget)" in legend, legend
