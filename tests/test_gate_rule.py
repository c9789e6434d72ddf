"""The gate's decision rule: three outcomes, exit codes, accepted inconclusive results, the gated
set, Holm over the gated cells, the size refusal and the stated resolution.

Runs are hand-built (tests/run_fixture.py) so that each outcome is known by construction; the
rule is the one documented in vocobench/gate/verdict.py (our contract), the statistics are
checked against scipy.stats (bootstrap, norm) and Holm 1979's step-down formula by hand.
"""
from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats as sst

sys.path.insert(0, str(Path(__file__).resolve().parent))

from run_fixture import seeded, write_run  # noqa: E402
from vocobench.cli import main as cli_main  # noqa: E402
from vocobench.errors import InputError  # noqa: E402
from vocobench.gate import Policy, assert_no_regression, compare_runs, freeze, markdown  # noqa: E402
from vocobench.gate.outputs import verdict_line  # noqa: E402

A, B = "u/ddim/10", "u/ddim/2"
N = 12
K = np.arange(N)
STOI = 0.8 + 0.01 * K                       # per-utterance baseline values
MCD = 5.0 + 0.1 * K
ALT = np.where(K % 2 == 0, 1.0, -1.0)       # alternating signs, mean 0


def _scores(stoi_a=0.0, stoi_b=0.0, n=N):
    """Baseline values plus per-utterance offsets (a number or an array) per configuration."""
    return {A: {"stoi": seeded(STOI[:n] + stoi_a, spread=0.002), "mcd": seeded(MCD[:n], spread=0.02)},
            B: {"stoi": seeded(STOI[:n] + stoi_b, spread=0.002), "mcd": seeded(MCD[:n], spread=0.02)}}


# Scenarios by construction (default policy: stoi allowance 0.01, mcd 0.2, confidence 0.95):
#   pass         candidate = baseline + 0.001·ALT: every drop bound ≈ 0.001 < allowance.
#   regression   stoi −0.05 on every utterance of A: the drop 0.05 > 0.01 on all 12 utterances.
#   inconclusive stoi ±0.04 alternating on A: mean 0, SD 0.042 → one-sided bound ≈ 1.645·0.042/√12
#                ≈ 0.02 > 0.01 (no pass), and no drop beyond 0.01 is shown (no regression).
SCENARIOS = {"pass": dict(stoi_a=0.001 * ALT, stoi_b=0.001 * ALT),
             "regression": dict(stoi_a=-0.05),
             "inconclusive": dict(stoi_a=0.04 * ALT)}
EXIT = {"pass": 0, "regression": 1, "inconclusive": 3}       # vocobench/gate/cli.py


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("rule")
    out = {"root": root, "base": write_run(root, "base", _scores())}
    for name, kw in SCENARIOS.items():
        out[name] = write_run(root, name, _scores(**kw))
    return out


@pytest.mark.parametrize("name", list(SCENARIOS))
def test_three_outcomes_with_distinct_exit_codes(runs, name, capsys):
    comp = compare_runs(runs["base"], runs[name])
    assert comp.verdict == name and comp.exit_code == EXIT[name]
    assert cli_main(["compare", str(runs["base"]), str(runs[name])]) == EXIT[name]
    assert capsys.readouterr().out.startswith(name.upper() + ":")


def test_inconclusive_exits_0_only_when_the_policy_accepts_it_and_says_so(runs, tmp_path, capsys):
    base, cand = str(runs["base"]), str(runs["inconclusive"])
    assert cli_main(["compare", base, cand]) == 3
    assert "not a pass (exit 3)" in capsys.readouterr().out
    policy = tmp_path / "policy.toml"
    policy.write_text("accept_inconclusive = true\n")
    js, md = tmp_path / "c.json", tmp_path / "c.md"
    for flags in (["--accept-inconclusive"], ["--policy", str(policy)]):
        assert cli_main(["compare", base, cand, "--json", str(js), "--markdown", str(md), *flags]) == 0
        out = capsys.readouterr().out
        assert out.startswith("INCONCLUSIVE, ACCEPTED by the policy (accept_inconclusive = true)")
        assert "not shown to be no worse" in out
        doc = json.loads(js.read_text())
        assert doc["verdict"] == "inconclusive" and doc["exit_code"] == 0
        assert doc["accepted_inconclusive"] is True
        assert "Accepted without evidence" in md.read_text()
    with pytest.raises(AssertionError, match="INCONCLUSIVE"):
        assert_no_regression(base, cand)
    assert assert_no_regression(base, cand, Policy(accept_inconclusive=True)).accepted


@pytest.mark.parametrize("accept", [False, True])
def test_exit_0_means_pass_or_an_accepted_inconclusive_result(runs, accept):
    for name in SCENARIOS:
        comp = compare_runs(runs["base"], runs[name], Policy(accept_inconclusive=accept))
        assert (comp.exit_code == 0) == (comp.verdict == "pass" or
                                         (comp.verdict == "inconclusive" and accept))
        assert comp.accepted == (comp.verdict == "inconclusive" and accept)


def test_new_failed_item_is_a_regression_even_when_every_cell_passes(tmp_path):
    base = write_run(tmp_path, "base", _scores())
    cand = write_run(tmp_path, "cand", _scores(), failed=((A, "u03", 1),))
    comp = compare_runs(base, cand)
    (a,) = [c for c in comp.configs if c.label == A]
    assert all(m.verdict == "pass" for m in a.metrics)      # u03 still has seed 0
    assert a.verdict == "regression" and "1 new failed item" in a.reasons[0]
    assert comp.exit_code == 1


# ---------------------------------------------------------------- the gated set

def _recommend(run: Path, labels: list[str]) -> None:
    (run / "report").mkdir(exist_ok=True)
    (run / "report" / "recommendation.json").write_text(json.dumps(
        {"format": "vocobench-recommendation/1", "reference": A, "recommended": labels}))


def test_recorded_recommendation_is_gated_the_rest_is_information(tmp_path, capsys):
    base = write_run(tmp_path, "base", _scores())
    cand = write_run(tmp_path, "cand", _scores(stoi_b=-0.05))      # B is worse, A is not
    assert compare_runs(base, cand).verdict == "regression"         # no recommendation: all gated
    _recommend(base, [A])
    comp = compare_runs(base, cand)
    assert [c.label for c in comp.gated] == [A] and [c.label for c in comp.information] == [B]
    assert comp.verdict == "pass" and comp.exit_code == 0
    assert comp.counts(False)["regression"] == 1                    # reported, not deciding
    assert "recommended configuration (u/ddim/10)" in comp.gated_by
    assert all(math.isnan(m.p_holm) for m in comp.information[0].metrics)
    assert "information, not gated" in verdict_line(comp) and "Information" in markdown(comp)
    assert cli_main(["compare", str(base), str(cand), "--gate", "all"]) == 1
    assert cli_main(["compare", str(base), str(cand), "--gate", B]) == 1
    assert cli_main(["compare", str(base), str(cand), "--gate", "u/ddim/7"]) == 2
    assert "field 'gated'" in capsys.readouterr().err
    # a frozen baseline carries the recommendation, and gates the same way
    frozen = freeze(base, tmp_path / "base.json")
    assert json.loads(frozen.read_text())["recommendation"]["recommended"] == [A]
    assert [c.label for c in compare_runs(frozen, cand).gated] == [A]


def test_holm_runs_over_the_gated_cells_only(runs):
    comp = compare_runs(runs["base"], runs["inconclusive"])        # no recommendation: 4 cells
    cells = [m for c in comp.gated for m in c.metrics]
    assert len(cells) == 4
    # Holm 1979 by hand: sorted p_(1..m), adjusted max_{j≤i} min(1, (m − j + 1)·p_(j))
    p = np.array([m.p for m in cells])
    order = np.argsort(p)
    adj = np.maximum.accumulate(np.minimum(1, (4 - np.arange(4)) * p[order]))
    expect = np.empty(4)
    expect[order] = adj
    assert [m.p_holm for m in cells] == pytest.approx(list(expect))
    one = compare_runs(runs["base"], runs["inconclusive"], Policy(gated=(A,)))
    assert len([m for c in one.gated for m in c.metrics]) == 2


# ---------------------------------------------------------------- size and resolution

def test_too_small_a_test_set_is_refused_before_comparing_with_the_figures(tmp_path, capsys):
    base = write_run(tmp_path, "base", _scores(n=6))
    cand = write_run(tmp_path, "cand", _scores(stoi_a=-0.05, n=6))
    with pytest.raises(InputError) as e:
        compare_runs(base, cand)
    msg = str(e.value)
    # 2^-6 = 0.0156 (exact Wilcoxon / sign-flip minimum, Wilcoxon 1945) > 0.05/4 = 0.0125
    assert e.value.field == "min_items" and "6 paired utterances" in msg
    assert "2^-6 = 0.0156" in msg and "0.05/4 = 0.0125" in msg and "fewer than min_items = 10" in msg
    assert "at least 10" in msg
    assert cli_main(["compare", str(base), str(cand)]) == 2
    assert "refused before comparing" in capsys.readouterr().err
    # gating one configuration: 2 tests, 2^-6 ≤ 0.05/2; with min_items 6 a verdict is possible
    assert cli_main(["compare", str(base), str(cand), "--min-items", "6", "--gate", A]) == 1


def test_resolution_is_the_stated_formula_and_is_printed(runs, capsys):
    comp = compare_runs(runs["base"], runs["inconclusive"])
    m = {x.column: x for x in comp.configs[0].metrics}["stoi"]
    d = (0.04 * ALT)                            # the constructed per-utterance differences
    assert m.sd == pytest.approx(np.std(d, ddof=1), rel=1e-9)
    # δ + (z_{1−α/m} + z_power)·σ/√n (Chow, Shao & Wang 2008), z from scipy.stats.norm
    z = sst.norm.ppf(1 - 0.05 / 4) + sst.norm.ppf(0.9)
    assert m.detectable == pytest.approx(0.01 + z * m.sd / math.sqrt(N), rel=1e-9)
    cli_main(["compare", str(runs["base"]), str(runs["inconclusive"])])
    out = capsys.readouterr().out
    assert (f"with {N} utterances and this spread (paired SD {m.sd:.3g}), the smallest drop this "
            f"test can show is {m.detectable:.3g} score") in out


def test_bootstrap_resamples_are_raised_for_a_large_gated_family(runs):
    # 1/(B + 1) must sit P_RESOLUTION (10) times below α/m: with 4 cells 2000 suffices; with a
    # confidence of 0.999 (α/m = 0.00025) B becomes 10/0.00025 − 1 = 39999, and the note says so
    comp = compare_runs(runs["base"], runs["pass"], Policy(confidence=0.999))
    expect = math.ceil(10 / ((1 - 0.999) / 4)) - 1
    assert any(f"raised from 2000 to {expect}" in n for n in comp.notes)
    assert not any("raised" in n for n in compare_runs(runs["base"], runs["pass"]).notes)
