"""The sample-size planner (vocobench/gate/plan.py) on hand-built pilot runs.

Expected figures are computed here from the documented formulas with scipy.stats.norm:
n = ((z_{1−α'} + z_power)·σ_d / effect)² (normal approximation of a one-sided paired test;
Chow, Shao & Wang 2008, §3.1, from memory), σ_d² = 2·σ_w²/k for fresh seeds (σ_w² the pooled
within-utterance variance, the one-way ANOVA within mean square).
"""
from __future__ import annotations

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
from vocobench.gate.plan import plan_size  # noqa: E402

A, B = "u/ddim/10", "u/ddim/2"
N = 12
K = np.arange(N)
SPREAD = 0.02 + 0.01 * (K % 3)                     # per-utterance seed spread (±, 2 seeds)
OFFSET = 0.01 * np.where(K % 2 == 0, 1.0, -1.0) * (1 + K / 12)


def _pilot(root, seeds=(0, 1)):
    stoi = 0.8 + 0.01 * K
    vals = (stoi[:, None] + SPREAD[:, None] * np.array([1.0, -1.0])[None, :]) if len(seeds) == 2 \
        else stoi[:, None]
    mcd = seeded(5.0 + 0.1 * K, seeds=len(seeds), spread=0.05)
    return write_run(root, "pilot", {A: {"stoi": vals, "mcd": mcd},
                                     B: {"stoi": vals + OFFSET[:, None], "mcd": mcd}}, seeds=seeds)


def _z(q):
    return sst.norm.ppf(q)


def test_fresh_seed_plan_matches_the_formula(tmp_path):
    plan = plan_size(_pilot(tmp_path), {"stoi": 0.03}, power=0.9)
    # within-utterance variance of two seeds at ±s_u: Σ 2 s_u² / Σ(2 − 1); σ_d² = 2σ_w²/2
    sigma_w2 = float(np.sum(2 * SPREAD ** 2) / N)
    sd = math.sqrt(2 * sigma_w2 / 2)
    m = 4                                           # 2 gated configurations × stoi, mcd
    flag = math.ceil(((_z(1 - 0.05 / m) + _z(0.9)) * sd / (0.03 - 0.01)) ** 2)
    ok = math.ceil(((_z(0.95) + _z(0.9)) * sd / 0.01) ** 2)
    assert plan.tests == m and len(plan.rows) == 2
    for row in plan.rows:
        assert row["sd"] == pytest.approx(sd, rel=1e-9)
        assert (row["flag"], row["pass"]) == (flag, ok)
        assert row["needed"] == max(flag, ok, 10)
    assert plan.needed == max(flag, ok, 10)
    assert flag > 10 and ok > flag                  # the formula, not a floor, decides here


def test_paired_plan_uses_the_observed_paired_spread(tmp_path):
    plan = plan_size(_pilot(tmp_path), {"stoi": 0.05}, power=0.8, match={A: B})
    (row,) = plan.rows
    sd = float(np.std(OFFSET, ddof=1))              # B − A per utterance (seed means)
    assert row["sd"] == pytest.approx(sd, rel=1e-9) and plan.tests == 2
    flag = math.ceil(((_z(1 - 0.05 / 2) + _z(0.8)) * sd / (0.05 - 0.01)) ** 2)
    assert row["flag"] == max(flag, 6)              # 2^-6 ≤ 0.05/2 floor (Wilcoxon 1945)


def test_a_drop_within_the_allowance_can_never_be_flagged(tmp_path):
    plan = plan_size(_pilot(tmp_path), {"stoi": 0.005})
    assert all(r["flag"] is None for r in plan.rows) and plan.needed is None


def test_cli_prints_the_table_and_checks_its_input(tmp_path, capsys):
    run = _pilot(tmp_path)
    assert cli_main(["plan-size", str(run), "--drop", "stoi=0.03", "--power", "0.9"]) == 0
    out = capsys.readouterr().out
    assert "needed for every row:" in out and "paired SD" in out and "Chow, Shao & Wang" in out
    assert cli_main(["plan-size", str(run), "--drop", "stoi"]) == 2
    assert cli_main(["plan-size", str(run), "--drop", "nope=0.1"]) == 2
    assert cli_main(["plan-size", str(run), "--drop", "stoi=-1"]) == 2
    assert "--drop" in capsys.readouterr().err
    one = _pilot(tmp_path / "one", seeds=(0,))
    with pytest.raises(InputError, match="two seeds"):
        plan_size(one, {"stoi": 0.03})
