"""Configuration keys, column direction, text formatting and the one paired comparison.

Sources: GitHub-flavoured Markdown spec, "Tables (extension)" (a ``|`` inside a cell is written
``\\|``); the LaTeX kernel's text-mode escapes (``\\&``, ``\\%``, ``\\_`` …); the paired chain of
vocobench/stats.py's docstring (our own contract), checked against scipy directly.
"""
from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sst

from vocobench.errors import InputError
from vocobench.gate import markdown
from vocobench.gate.policy import resolve_policy
from vocobench.gate.verdict import Comparison, ConfigResult, MetricResult
from vocobench.keys import ConfigKey, directed_columns, is_directed, labels
from vocobench.stats import (BootstrapSettings, bootstrap_mean_intervals, holm, holm_family,
                             paired_comparison)
from vocobench.textfmt import (fmt, fmt_p, fmt_signed, interval, latex_escape, latex_table, md_cell,
                               md_table)


def test_config_key_label_parse_and_frame_labels():
    k = ConfigKey("cos/ine", "ddim", 8)
    assert k.label == "cos/ine/ddim/8" and ConfigKey.parse(k.label) == k
    frame = pd.DataFrame({"schedule": ["a", "b"], "sampler": ["x", "y"], "steps": [4, 16.0]})
    assert list(labels(frame)) == ["a/x/4", "b/y/16"]
    with pytest.raises(InputError, match="schedule/sampler/steps") as e:
        ConfigKey.parse("a/4", source="cfg.toml", field="decide.reference")
    assert e.value.field == "decide.reference"
    with pytest.raises(InputError, match="integer"):
        ConfigKey.parse("a/x/many")


def test_directed_columns_from_specs_and_objects():
    cols = {"pesq": {"higher_is_better": True}, "mcd": {"higher_is_better": False},
            "frames": {"higher_is_better": None}, "odd": {"higher_is_better": 1}, "bare": None}
    assert directed_columns(cols) == ["pesq", "mcd"]
    objs = [SimpleNamespace(name="a", higher_is_better=False), SimpleNamespace(name="b", higher_is_better=None)]
    assert directed_columns(objs) == ["a"] and not is_directed({})


def test_number_formats():
    assert fmt_signed(-0.2104) == "−0.210" and fmt_signed(0.0123) == "+0.012"
    assert fmt_signed(float("nan")) == "n/a" and fmt_signed(None) == "n/a"
    assert fmt(1234.5678) == "1235" and fmt(0.5, sign=True) == "+0.5" and fmt(None) == "–"
    assert fmt_p(0.0004) == "<0.001" and fmt_p(0.04321) == "0.043"
    assert interval(1.0, 0.9, 1.1) == "1 [0.9, 1.1]" and interval(1.0, float("nan"), 1.1) == "1"


def test_markdown_cells_and_table_escape():
    assert md_cell("a|b <i>&\nc") == "a\\|b &lt;i>& c"          # `>` and `&` stay readable
    text = md_table(["name", "value"], [["x|y", "1"]], align="lr")
    assert text.splitlines() == ["| name | value |", "|:---|---:|", "| x\\|y | 1 |"]
    assert md_table(["a", "b"], []).splitlines()[1] == "|---|---|"


def test_latex_cells_escape():
    assert latex_escape("50% a_b & {c}") == r"50\% a\_b \& \{c\}"
    assert r"x\_1 & 2 \\" in latex_table(["n", "v"], [["x_1", "2"]])


def test_gate_markdown_escapes_a_pipe_in_a_label():
    m = MetricResult("stoi", "", True, 8, 0.9, 0.9, 0.0, -0.01, 0.01, 0.01, "0.01", 0.5, 0.5)
    comp = Comparison("base", "cand", [ConfigResult("a|b/ddim/4", "a|b/ddim/4", metrics=[m])],
                      resolve_policy(None))
    rows = [line for line in markdown(comp).splitlines() if line.startswith("| `a")]
    assert rows and all(line.count(" | ") == 5 and "a\\|b/ddim/4" in line for line in rows)


def test_paired_comparison_is_the_documented_chain():
    rng = np.random.default_rng(3)
    base = rng.normal(2.0, 0.3, 12)
    cand = base - 0.1 + rng.normal(0, 0.05, 12)
    base[4], cand[7] = np.nan, np.inf                         # those two pairs are left out
    s = BootstrapSettings(n_resamples=500, seed=5)
    r = paired_comparison(base, cand, s, higher_is_better=True)
    ok = np.isfinite(base) & np.isfinite(cand)
    d = cand[ok] - base[ok]
    (lo, hi), (low, _), (_, high) = bootstrap_mean_intervals(d, s, ("two-sided", "greater", "less"))
    assert r.n == 10 and r.diff == d.mean() and (r.diff_low, r.diff_high) == (lo, hi)
    assert (r.bound_lower, r.bound_upper) == (low, high) and r.worse_bound == low
    assert r.p == pytest.approx(sst.wilcoxon(d).pvalue, abs=0)
    # Series pair by index, whatever their order
    idx = [f"u{i}" for i in range(12)]
    rs = paired_comparison(pd.Series(base, idx), pd.Series(cand, idx)[::-1], s)
    assert (rs.n, rs.diff, rs.p) == (r.n, pytest.approx(r.diff, rel=1e-12), r.p)
    fam = holm_family([r, paired_comparison(base, base + 0.5, s, False)])
    assert [f.p_holm for f in fam] == list(holm([f.p for f in fam])) and math.isnan(r.p_holm)
    with pytest.raises(ValueError):
        paired_comparison([1.0, 2.0], [1.0], s)
