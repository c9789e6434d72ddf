"""Tests of the report: recommendation, options, table, renderings, CLI, on a hand-built run.

The run is tests/test_report_fixture.py; every expected value is worked out by hand below.
"""
from __future__ import annotations

import argparse
import io
import math
import sys
from contextlib import redirect_stdout
from pathlib import Path

import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from test_report_fixture import make_run  # noqa: E402
from vocobench.errors import InputError  # noqa: E402
from vocobench.report import ReportOptions, render_report  # noqa: E402
from vocobench.report import cli  # noqa: E402

# The fixture has 4 utterances: below the default decide.min_items (10), and 2^-4 = 0.0625 is
# above α = 0.05, so at the defaults nothing may be recommended (test_too_few_utterances_...).
# The rule tests lower both bars: min_items 4, confidence 0.9 (2^-4 ≤ 0.1).
FAST = dict(resamples=300, plots=False, page=False, min_items=4, confidence=0.9)
MARGINS = {"mcd_db": 0.5, "pesq_wb": 0.1}


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    return make_run(tmp_path_factory.mktemp("r"))


def _render(run_dir, **kw):
    opts = ReportOptions(**{**FAST, **kw})
    return render_report(run_dir, opts, echo=False)


def test_recommendation_matches_hand_calculation(run_dir):
    # Hand calculation (fixture offsets to the reference linear/ddim/64, margins MCD 0.5 dB,
    # PESQ 0.1). A bootstrap bound of a mean is a quantile of resample means, so it lies in
    # [min d, max d]:
    #   linear/ddim/8  MCD d ∈ [0.6, 0.9]  → upper bound ≥ 0.6 > 0.5: outside.
    #   linear/ddim/16 MCD d ∈ [0.2, 0.4]  → bound ≤ 0.4 < 0.5; PESQ d ∈ [−0.05, −0.02] → bound
    #                  ≥ −0.05 > −0.1: inside both, median RTF 0.16.
    #   linear/ddpm/4  best scores and cheapest (0.04) but one failed item: never recommended.
    # (a) → linear/ddim/16.
    # (b) RTF budget 0.35, primary PESQ: candidates without failures are 8 (3.275), 16 (3.615),
    #   32 (3.64) [means = 3.65 + mean offset]; highest → linear/ddim/32.
    res = _render(run_dir, margins=MARGINS, rtf_budget=0.35, primary="pesq_wb")
    d = res.decision
    assert d.reference == "linear/ddim/64"
    assert d.cheapest == "linear/ddim/16"
    assert d.best_in_budget == "linear/ddim/32"
    assert "linear/ddpm/4" in d.excluded and "linear/ddpm/4" not in d.recommended
    assert "linear/ddim/16" in res.recommendation and "linear/ddim/32" in res.recommendation
    assert "no substitute for listening tests" in res.recommendation
    t = res.table.set_index("config")
    assert t.loc["linear/ddim/32", "pesq_wb_mean"] == pytest.approx(3.64)
    assert t.loc["linear/ddim/16", "pesq_wb_mean"] == pytest.approx(3.615)


def test_recommendation_moves_with_margins(run_dir):
    # Hand: MCD margin 0.18 → 16 (d ≥ 0.2) is outside; 32 has d ∈ [0.05, 0.15], bound ≤ 0.15 <
    # 0.18, PESQ d ∈ [−0.02, 0] inside 0.1 → (a) = linear/ddim/32.
    res = _render(run_dir, margins={"mcd_db": 0.18, "pesq_wb": 0.1})
    assert res.decision.cheapest == "linear/ddim/32"
    # Hand: MCD margin 0.01 → 8, 16, 32 all have d ≥ 0.05 > 0.01; cosine/ddim/64 (+0.05) too;
    # only the reference itself remains → (a) = the reference.
    res = _render(run_dir, margins={"mcd_db": 0.01, "pesq_wb": 0.1})
    assert res.decision.cheapest == "linear/ddim/64"
    assert "the reference itself" in res.recommendation


def test_default_margin_is_relative_to_reference_mean(run_dir):
    # Hand: reference means MCD 3.3 dB and PESQ 3.65; margin_rel 0.05 → 0.165 dB and 0.1825.
    # 16: MCD d ≥ 0.2 > 0.165 → out; 32: MCD d ≤ 0.15 < 0.165, PESQ d ≥ −0.02 > −0.1825 → in.
    res = _render(run_dir, margin_rel=0.05)
    assert res.decision.margins["mcd_db"] == (pytest.approx(0.165), "default")
    assert res.decision.margins["pesq_wb"][0] == pytest.approx(0.1825)
    assert res.decision.cheapest == "linear/ddim/32"


def test_budget_with_no_candidate_and_failed_only_candidate(run_dir):
    # Hand: RTF budget 0.05 → only linear/ddpm/4 (0.04) fits, and it has a failed item → none.
    res = _render(run_dir, margins=MARGINS, rtf_budget=0.05)
    assert res.decision.best_in_budget is None
    assert "No configuration without failures" in res.recommendation


def test_table_latency_failures_and_pareto_front(run_dir):
    # Hand: Pareto front over (median RTF, mean), configs with failed items left off.
    # MCD means (lower better): 8 4.05 @0.08, 16 3.6 @0.16, 32 3.4 @0.32, 64 3.3 @0.64,
    #   cosine/64 3.35 @0.66 (dominated by linear/64: cheaper and lower) → front = 8, 16, 32, 64.
    # PESQ means (higher better): 3.275, 3.615, 3.64, 3.65, cosine/64 3.66 @0.66 (best PESQ, so on
    #   the front) → front = all five without failures.
    res = _render(run_dir, margins=MARGINS)
    t = res.table.set_index("config")
    mcd_front = set(t.index[t["mcd_db_front"]])
    pesq_front = set(t.index[t["pesq_wb_front"]])
    assert mcd_front == {"linear/ddim/8", "linear/ddim/16", "linear/ddim/32", "linear/ddim/64"}
    assert pesq_front == mcd_front | {"cosine/ddim/64"}
    assert t.loc["linear/ddpm/4", "failed"] == 1 and t.loc["linear/ddpm/4", "pareto"] == ""
    # Hand (fixture timing): RTF median = r, p90 = 1.1·r (see test_stats).
    assert t.loc["linear/ddim/16", "rtf_median"] == pytest.approx(0.16)
    assert t.loc["linear/ddim/16", "rtf_p90"] == pytest.approx(0.176)
    assert t.loc["linear/ddim/64", "reference"]
    assert math.isnan(t.loc["linear/ddim/64", "mcd_db_p_holm"])


def test_files_written_and_renderings(run_dir):
    res = _render(run_dir, margins=MARGINS, plots=True, svg=True)
    rep = run_dir / "report"
    for name in ("table.md", "table.csv", "table.tex", "recommendation.md"):
        assert (rep / name).is_file(), name
    # CSV round-trips the table (pandas is the reader).
    back = pd.read_csv(rep / "table.csv")
    assert list(back["config"]) == list(res.table["config"])
    assert back["rtf_median"].tolist() == pytest.approx(res.table["rtf_median"].tolist())
    # LaTeX: underscores escaped (LaTeX special character), one row per configuration.
    tex = (rep / "table.tex").read_text()
    assert r"\begin{tabular}" in tex and r"mcd\_db" in tex and "mcd_db" not in tex
    assert tex.count(r" \\") == len(res.table) + 1
    # Markdown: header + alignment row + one row per configuration.
    md = (rep / "table.md").read_text()
    assert sum(1 for line in md.splitlines() if line.startswith("|")) == len(res.table) + 2
    # summary.md: metric variants from the manifest, the caution, the recommendation.
    summary = (run_dir / "summary.md").read_text()
    assert "mcd: alpha=0.42, order=24" in summary and 'pesq: mode="wb"' in summary
    assert "no substitute for listening tests" in summary
    assert "linear/ddim/16" in summary
    # Plots: PNG signature (PNG spec, ISO/IEC 15948) and SVG root, per metric and kind.
    for col in ("mcd_db", "pesq_wb"):
        for kind in ("vs_rtf", "vs_steps", "spread"):
            assert (rep / "plots" / f"{col}_{kind}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
            assert "<svg" in (rep / "plots" / f"{col}_{kind}.svg").read_text()[:2000]


def test_svg_only_on_request(run_dir):
    _render(run_dir, margins=MARGINS, plots=True)
    plots = run_dir / "report" / "plots"
    assert list(plots.glob("*.png")) and not list(plots.glob("*.svg"))


def test_column_names_come_from_the_manifest(tmp_path):
    # Hand: same numbers under other column names → same decision (names are never hard-coded).
    run = make_run(tmp_path, names=("dist_a", "score_b"))
    res = _render(run, margins={"dist_a": 0.5, "score_b": 0.1}, rtf_budget=0.35, primary="score_b")
    assert res.decision.cheapest == "linear/ddim/16"
    assert res.decision.best_in_budget == "linear/ddim/32"


@pytest.mark.parametrize("table, field", [
    ({"confidence": 1.5}, "decide.confidence"),
    ({"margins": {"pesq_wb": -1}}, "decide.margins.pesq_wb"),
    ({"margins": 0.1}, "decide.margins"),
    ({"rtf_budget": 0}, "decide.rtf_budget"),
    ({"resamples": 10}, "decide.resamples"),
    ({"method": "jackknife"}, "decide.method"),
    ({"plots": "yes"}, "decide.plots"),
    ({"metrics": "mcd_db"}, None),              # a comma string is accepted as a list
    ({"margin": {"mcd_db": 1}}, "decide.margin"),   # typo of a key
])
def test_options_validation_names_the_field(table, field):
    # Source: the option rules documented in vocobench/report/options.py and the project rule
    # that bad input raises InputError naming the field (vocobench/errors.py).
    if field is None:
        assert ReportOptions.from_mapping(table).metrics == ("mcd_db",)
        return
    with pytest.raises(InputError) as e:
        ReportOptions.from_mapping(table)
    assert e.value.field == field


@pytest.mark.parametrize("opts, field", [
    ({"metrics": ("nope",)}, "decide.metrics"),
    ({"primary": "nope"}, "decide.primary"),
    ({"margins": {"nope": 1.0}}, "decide.margins.nope"),
    ({"reference": "linear/ddim/999"}, "decide.reference"),
    ({"reference": "linear-ddim-64"}, "decide.reference"),
    ({"listen": ("cosine/ddpm/3",)}, "decide.listen"),
])
def test_options_checked_against_the_run(run_dir, opts, field):
    # Source: as above; names must exist in manifest["columns"] / the run's configurations.
    with pytest.raises(InputError) as e:
        _render(run_dir, **opts)
    assert e.value.field == field


def test_decide_table_in_manifest_is_the_default(tmp_path):
    # The manifest's `decide` (the config's [decide] table) drives the report when no options
    # are passed; hand: reference 32 → 16 (MCD d vs 32 = (0.15, 0.2, 0.25, 0.2) ≤ 0.25 < 0.5;
    # PESQ d vs 32 = (−0.01, −0.03, −0.03, −0.03) > −0.1) is the cheapest inside the margins.
    run = make_run(tmp_path, decide={"reference": "linear/ddim/32", "margins": MARGINS,
                                     "plots": False, "page": False, "resamples": 300,
                                     "min_items": 4, "confidence": 0.9})
    res = render_report(run, echo=False)
    assert res.decision.reference == "linear/ddim/32"
    assert res.decision.cheapest == "linear/ddim/16"


def _args(*argv):
    p = argparse.ArgumentParser()
    cli.add_arguments(p)
    return p.parse_args(list(argv))


def test_cli_flags_override_and_bad_input_exits_2(run_dir, capsys):
    # Flags override the manifest: --reference 32 and the margins give (a) = 16 as above.
    out = io.StringIO()
    with redirect_stdout(out):
        rc = cli.main(_args(str(run_dir), "--reference", "linear/ddim/32", "--margin", "mcd_db=0.5",
                            "--margin", "pesq_wb=0.1", "--resamples", "300", "--no-plots", "--no-page",
                            "--min-items", "4", "--confidence", "0.9"))
    assert rc == 0
    text = out.getvalue()
    assert "Quality against latency" in text and "ref reference: linear/ddim/32" in text
    assert "Cheapest configuration no worse than the reference: linear/ddim/16" in text
    assert cli.main(_args(str(run_dir), "--margin", "mcd_db:0.5", "--quiet")) == 2
    assert "--margin" in capsys.readouterr().err
    assert cli.main(_args(str(run_dir), "--confidence", "2", "--quiet")) == 2
    assert cli.main(_args(str(run_dir / "missing"), "--quiet")) == 2


def test_report_is_reproducible(run_dir):
    # Common practice, no source: with the recorded bootstrap seed, rendering twice gives the
    # same numbers and words; a different seed is recorded in the text.
    a = _render(run_dir, margins=MARGINS)
    b = _render(run_dir, margins=MARGINS)
    pd.testing.assert_frame_equal(a.table, b.table)
    assert a.recommendation == b.recommendation
    c = _render(run_dir, margins=MARGINS, seed=5)
    assert "seed 5" in c.recommendation and "seed 0" in a.recommendation
