"""Release regression gate on real (tiny) run directories made by vocobench.sweep.run.

Sources of the expectations: the verdict rule and file formats documented in
vocobench/gate/compare.py and vocobench/gate/baseline.py (our own contracts); reference
libraries for the statistics (scipy.stats.wilcoxon, scipy.stats.bootstrap); the common Ant/Jenkins
JUnit XML layout (testsuite@name,tests,failures,errors,skipped; testcase@name,classname;
<failure>/<skipped> children — common practice, no single published standard); exit codes from
vocobench/gate/cli.py (0 pass, 1 regression, 2 unusable input, 3 inconclusive). The runs use
12 of the demo recordings: enough for the default policy (min_items 10; 2^-12 below Holm's
first threshold), so most checks run at the defaults.
"""
from __future__ import annotations

import gzip
import json
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
from scipy import stats as sst

from vocobench.cli import main as cli_main
from vocobench.config import load_config
from vocobench.errors import InputError
from vocobench.gate import (BASELINE_FORMAT, Policy, ab_compare, assert_no_regression, compare_runs,
                            freeze, junit, load_policy, markdown, verdict_line)
from vocobench.gate.policy import parse_allow_option
from vocobench.store import load_run
from vocobench.sweep import run

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "pier-announcements" / "testset"
ALL12 = [f"pier{i:02d}.wav" for i in range(1, 13)]


def _config(root: Path, name: str, files, steps=(1, 4), extra: str = "", target=None) -> Path:
    ts = root / f"ts_{name}"
    ts.mkdir()
    for f in files:
        shutil.copy(DEMO / f, ts / f)
    cfg = root / f"{name}.toml"
    cfg.write_text(f"""
[vocoder]
target = "{target or 'vocobench.analytic:AnalyticDenoiser'}"
[testset]
path = "ts_{name}"
[sweep]
steps = {list(steps)}
samplers = ["ddim"]
seeds = [0, 1]
[metrics]
use = ["pesq_wb", "stoi"]
[timing]
repeats = 1
utterances = 1
[output]
save_audio = "none"
{extra}
""")
    return cfg


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("gate")
    a = run(load_config(_config(root, "a", ALL12)), root / "run_a", progress=False, report=False)
    small = run(load_config(_config(root, "small", ALL12[:3])), root / "run_small", progress=False,
                report=False)
    return {"root": root, "a": a, "small": small}


def _copy(src: Path, dst: Path) -> Path:
    shutil.copytree(src, dst)
    (dst / ".lock").unlink(missing_ok=True)
    return dst


def _rewrite_items(run_dir: Path, change) -> None:
    path = run_dir / "items.jsonl"
    recs = [json.loads(line) for line in path.read_text().splitlines() if line.strip()]
    recs = [change(r) for r in recs]
    path.write_text("".join(json.dumps(r) + "\n" for r in recs))


# ---------------------------------------------------------------- baseline files

@pytest.mark.parametrize("name", ["base.json", "base.json.gz"])
def test_freeze_then_compare_with_original_gives_pass_and_zero_differences(runs, tmp_path, name, capsys):
    # Our contract (gate/baseline.py): a baseline holds the records load_run keeps, so comparing
    # it with its own run must show exactly zero differences on both sides of the comparison.
    out = freeze(runs["a"], tmp_path / name)
    raw = out.read_bytes()
    if name.endswith(".gz"):
        assert raw[:2] == b"\x1f\x8b"                 # RFC 1952 gzip magic
        raw = gzip.decompress(raw)
    doc = json.loads(raw)
    assert doc["format"] == BASELINE_FORMAT
    assert all("audio_path" not in r for r in doc["items"])
    original = load_run(runs["a"])
    assert len(doc["items"]) == len(original.items)
    for b, c in ((out, runs["a"]), (runs["a"], out)):
        comp = compare_runs(b, c)
        assert comp.verdict == "pass" and comp.exit_code == 0
        assert [c.verdict for c in comp.configs] == ["pass"] * len(original.manifest["grid"])
        for cfg in comp.configs:
            assert cfg.new_failures == 0 and cfg.missing == 0
            for m in cfg.metrics:
                assert m.n == 12
                assert m.diff == 0.0 and m.diff_low == 0.0 and m.diff_high == 0.0
    # the baseline carries the run's recommendation (format vocobench-recommendation/1)
    assert doc["recommendation"]["format"] == "vocobench-recommendation/1"
    assert cli_main(["compare", str(out), str(runs["a"])]) == 0
    assert capsys.readouterr().out.startswith("PASS:")


def test_baseline_file_of_another_kind_is_refused(tmp_path):
    bad = tmp_path / "x.json"
    bad.write_text(json.dumps({"format": "something-else/1"}))
    with pytest.raises(InputError, match="baseline format"):
        compare_runs(bad, bad)


# ---------------------------------------------------------------- comparability

def test_different_test_sets_exit_2_with_one_line_reason(runs, capsys):
    code = cli_main(["compare", str(runs["a"]), str(runs["small"])])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert len(err.splitlines()) == 1
    assert "different test sets" in err and "--force" in err
    fp_a = load_run(runs["a"]).manifest["dataset"]["fingerprint"]
    assert fp_a in err


def test_force_compares_the_common_part_and_says_so(runs, tmp_path):
    cand = _copy(runs["a"], tmp_path / "cand")
    man = json.loads((cand / "manifest.json").read_text())
    man["length_policy"] = {**man["length_policy"], "mode": "pad"}
    (cand / "manifest.json").write_text(json.dumps(man))
    with pytest.raises(InputError, match="different length policies"):
        compare_runs(runs["a"], cand)
    comp = compare_runs(runs["a"], cand, force=True)
    assert any("different length policies" in f for f in comp.forced)
    assert all(m.n == 12 for c in comp.configs for m in c.metrics)
    assert "forced despite" in verdict_line(comp)
    assert "--force" in markdown(comp)


def test_forced_comparison_on_too_few_shared_utterances_is_refused_with_the_figures(runs, capsys):
    # Only the 3 recordings of the small run are shared. Smallest exact paired p-value on 3
    # differences: 2^-3 = 0.125 (Wilcoxon 1945: all signs equal), above α/m = 0.05/4: no
    # regression could ever be shown, so the gate refuses (exit 2) instead of passing.
    with pytest.raises(InputError) as e:
        compare_runs(runs["a"], runs["small"], force=True)
    msg = str(e.value)
    assert "too small" in msg and "3 paired utterances" in msg and "2^-3 = 0.125" in msg
    assert "0.05/4 = 0.0125" in msg and "at least 10" in msg
    assert cli_main(["compare", str(runs["a"]), str(runs["small"]), "--force"]) == 2
    assert "too small" in capsys.readouterr().err


def test_different_grid_refused_unless_configurations_are_matched(runs, tmp_path):
    other = run(load_config(_config(tmp_path, "b", ALL12, steps=(1, 2))), tmp_path / "run_b",
                progress=False, report=False)
    with pytest.raises(InputError, match="different configurations"):
        compare_runs(runs["a"], other)
    comp = compare_runs(runs["a"], other, match={"uniform/ddim/1": "uniform/ddim/1"})
    assert [c.name for c in comp.configs] == ["uniform/ddim/1"]
    # same denoiser, same seeds, same utterances: the 1-step outputs are bit-identical
    assert all(m.diff == 0.0 for m in comp.configs[0].metrics)


def test_same_id_different_content_does_not_pair(runs, tmp_path):
    cand = _copy(runs["a"], tmp_path / "cand")
    _rewrite_items(cand, lambda r: {**r, "utt_sha": "0" * 16} if r["utt_id"] == "pier02" else r)
    comp = compare_runs(runs["a"], cand)
    assert all(m.n == 11 for c in comp.configs for m in c.metrics)
    assert all(c.missing == 2 for c in comp.configs)               # pier02 × 2 seeds, per config


# ---------------------------------------------------------------- verdicts

def test_new_failed_item_is_a_regression_and_exit_1(runs, tmp_path, capsys):
    cand = _copy(runs["a"], tmp_path / "cand")

    def fail_one(r):
        if (r["utt_id"], r["steps"], r["seed"]) == ("pier03", 4, 1):
            return {**r, "status": "failed", "failure": "vocoder raised RuntimeError: injected",
                    "metrics": {k: None for k in r["metrics"]}}
        return r

    _rewrite_items(cand, fail_one)
    comp = compare_runs(runs["a"], cand)
    verdicts = {c.label: c for c in comp.configs}
    assert verdicts["uniform/ddim/4"].verdict == "regression"
    assert verdicts["uniform/ddim/4"].new_failures == 1
    assert verdicts["uniform/ddim/1"].verdict != "regression"
    assert comp.exit_code == 1
    line = verdict_line(comp)
    assert line.startswith("REGRESSION: 1 of 2 gated configurations worse") and "new failed item" in line
    assert cli_main(["compare", str(runs["a"]), str(cand)]) == 1
    assert capsys.readouterr().out.startswith("REGRESSION:")
    with pytest.raises(AssertionError) as exc:
        assert_no_regression(runs["a"], cand)
    assert str(exc.value).startswith("### vocobench compare: ❌ REGRESSION")
    assert "uniform/ddim/4" in str(exc.value)


def test_junit_xml_has_one_testcase_per_configuration(runs, tmp_path):
    cand = _copy(runs["a"], tmp_path / "cand")
    _rewrite_items(cand, lambda r: {**r, "status": "failed", "failure": "injected"}
                   if (r["utt_id"], r["steps"]) == ("pier01", 1) else r)
    path = tmp_path / "gate.xml"
    # gated: the 1-step configuration only; the 4-step one is information (a skipped case)
    assert cli_main(["compare", str(runs["a"]), str(cand), "--junit", str(path),
                     "--gate", "uniform/ddim/1"]) == 1
    root = ET.parse(path).getroot()
    suites = [root] if root.tag == "testsuite" else root.findall("testsuite")
    assert root.tag in ("testsuites", "testsuite") and len(suites) == 1
    suite = suites[0]
    cases = suite.findall("testcase")
    grid = load_run(runs["a"]).manifest["grid"]
    assert len(cases) == len(grid) == int(suite.get("tests"))
    assert {c.get("name") for c in cases} == {f"{g['schedule']}/{g['sampler']}/{g['steps']}" for g in grid}
    assert all(c.get("classname") for c in cases)
    failures = [c for c in cases if c.find("failure") is not None]
    skipped = [c for c in cases if c.find("skipped") is not None]
    assert int(suite.get("failures")) == len(failures) == 1
    assert int(suite.get("skipped")) == len(skipped) == 1
    assert int(suite.get("errors")) == 0
    assert failures[0].get("name") == "uniform/ddim/1"
    assert failures[0].find("failure").get("message")
    assert "information, not gated" in skipped[0].find("skipped").get("message")


def test_paired_statistics_match_scipy_on_a_cheaper_setting(runs):
    # Compare 1 step against 4 steps of the same run (same seeds: common random numbers).
    policy = Policy(allow={"stoi": parse_allow_option("stoi=0")[1]})
    comp = compare_runs(runs["a"], runs["a"], policy, match={"uniform/ddim/4": "uniform/ddim/1"})
    m = {x.column: x for x in comp.configs[0].metrics}["stoi"]
    items = load_run(runs["a"]).items
    per = items.groupby(["steps", "utt_id"])["stoi"].mean()
    d = (per.loc[1] - per.loc[4]).to_numpy()
    assert m.n == 12 and m.diff == pytest.approx(d.mean(), abs=1e-12)
    assert m.sd == pytest.approx(np.std(d, ddof=1), rel=1e-12)
    # reference library: scipy.stats.bootstrap, BCa (Efron 1987), one-sided at 0.95, seed 0
    boot = dict(n_resamples=2000, method="BCa", rng=np.random.default_rng(0))
    up = sst.bootstrap((d,), np.mean, confidence_level=0.95, alternative="less", **boot)
    low = sst.bootstrap((d,), np.mean, confidence_level=0.95, alternative="greater",
                        rng=np.random.default_rng(0), n_resamples=2000, method="BCa")
    assert m.diff_high == pytest.approx(up.confidence_interval.high, rel=1e-9)
    assert m.diff_low == pytest.approx(low.confidence_interval.low, rel=1e-9)
    # p of "drop > 0" read from the same draw: scipy's one-sided BCa bound at confidence 1 − p
    # sits at the threshold 0 (test–interval duality), when p is not at its floor 1/(B + 1)
    if 0.002 < m.p < 0.5:
        at = sst.bootstrap((d,), np.mean, confidence_level=1 - m.p, alternative="less",
                           rng=np.random.default_rng(0), n_resamples=2000, method="BCa")
        assert abs(at.confidence_interval.high) <= 0.02 * np.std(d, ddof=1)
    # Holm 1979 over the 2 gated cells (stoi, pesq_wb) by hand
    other = {x.column: x for x in comp.configs[0].metrics}["pesq_wb"]
    lo_p, hi_p = sorted([m.p, other.p])
    expect_holm = min(1.0, 2 * lo_p) if m.p == lo_p else max(min(1.0, 2 * lo_p), hi_p)
    assert m.p_holm == pytest.approx(expect_holm)
    # the rule of vocobench/gate/verdict.py by hand, allowance 0 (higher STOI is better)
    expect = ("pass" if m.diff_low > 0 else "regression" if m.p_holm <= 0.05 else "inconclusive")
    assert m.verdict == expect


def test_hardware_difference_makes_latency_not_comparable(runs, tmp_path):
    cand = _copy(runs["a"], tmp_path / "cand")
    man = json.loads((cand / "manifest.json").read_text())
    man["hardware"]["processor"] = "Some Other CPU @ 1.0GHz"
    (cand / "manifest.json").write_text(json.dumps(man))
    comp = compare_runs(runs["a"], cand)
    assert {c.latency.verdict for c in comp.configs} == {"not comparable"}
    assert all("processor" in c.latency.reason for c in comp.configs)
    assert comp.verdict == "pass"                   # quality unchanged: latency alone cannot decide
    assert "latency not comparable" in verdict_line(comp)
    same = compare_runs(runs["a"], runs["a"])
    assert all(c.latency.verdict != "not comparable" for c in same.configs)


def test_markdown_and_json_outputs(runs, tmp_path):
    md, js = tmp_path / "s.md", tmp_path / "s.json"
    assert cli_main(["compare", str(runs["a"]), str(runs["a"]),
                     "--markdown", str(md), "--json", str(js)]) == 0
    text = md.read_text()
    assert text.startswith("### vocobench compare: ✅ PASS") and "| configuration |" in text
    assert "smallest drop this test can show" in text
    doc = json.loads(js.read_text())
    assert doc["format"] == "vocobench-compare/2"
    assert doc["verdict"] == "pass" and doc["exit_code"] == 0
    assert len(doc["configurations"]) == 2


# ---------------------------------------------------------------- policy

def test_policy_file_options_and_errors(tmp_path):
    p = tmp_path / "policy.toml"
    p.write_text('min_items = 12\nmax_rtf_increase_pct = 5\naccept_inconclusive = true\n'
                 'gated = ["cosine/ddim/6"]\n[allow]\npesq_wb = 0.1\nlsd = "3%"\n'
                 '[bootstrap]\nn_resamples = 500\n')
    pol = load_policy(p)
    assert pol.min_items == 12 and pol.max_rtf_increase_pct == 5 and pol.n_resamples == 500
    assert pol.accept_inconclusive is True and pol.gated == ("cosine/ddim/6",)
    assert Policy().gated == "recommended" and Policy().accept_inconclusive is False
    assert pol.allowance("pesq_wb").margin(3.0) == 0.1
    assert pol.allowance("lsd").margin(-2.0) == pytest.approx(0.06)      # 3 % of |mean|
    assert pol.allowance("stoi").margin(0.9) == 0.01                      # default kept
    assert pol.allowance("mrstft").margin(0.5) == pytest.approx(0.01)    # default 2 % fallback
    p.write_text("min_item = 3\n")
    with pytest.raises(InputError, match="unknown key"):
        load_policy(p)
    for bad, field in (('gated = "some"', "gated"), ('gated = ["cosine-ddim-6"]', "gated"),
                       ('accept_inconclusive = "yes"', "accept_inconclusive"), ("power = 1.5", "power")):
        p.write_text(bad + "\n")
        with pytest.raises(InputError) as e:
            load_policy(p)
        assert e.value.field == field and e.value.source == str(p)
    with pytest.raises(InputError):
        parse_allow_option("pesq_wb=-0.1")
    with pytest.raises(InputError):
        parse_allow_option("pesq_wb")


def test_cli_policy_errors_exit_2(runs, capsys):
    assert cli_main(["compare", str(runs["a"]), str(runs["a"]), "--confidence", "1.5"]) == 2
    assert cli_main(["compare", str(runs["a"]), str(runs["a"]), "--allow", "stoi=x"]) == 2
    assert cli_main(["compare", str(runs["a"]), "/nonexistent/run"]) == 2
    capsys.readouterr()


# ---------------------------------------------------------------- A/B latency

SLOW = '''
import time
from vocobench.analytic import AnalyticDenoiser


class SlowDenoiser(AnalyticDenoiser):
    """The analytic denoiser plus a fixed delay per network call."""

    def predict_noise(self, x_t, features, t):
        time.sleep(0.03)
        return super().predict_noise(x_t, features, t)
'''


def test_ab_mode_flags_a_slower_candidate(tmp_path, capsys):
    (tmp_path / "slow.py").write_text(SLOW)
    base = _config(tmp_path, "fast", ALL12[:1], steps=(2,))
    cand = _config(tmp_path, "slow", ALL12[:1], steps=(2,), target="slow.py:SlowDenoiser")
    js = tmp_path / "ab.json"
    code = cli_main(["compare", "--ab", str(base), str(cand), "--repeats", "4", "-q", "--json", str(js)])
    assert capsys.readouterr().out.startswith("REGRESSION:")
    assert code == 1
    doc = json.loads(js.read_text())
    (cfg,) = doc["configurations"]
    lat = cfg["latency"]
    assert lat["source"] == "A/B" and lat["n_baseline"] == lat["n_candidate"] == 4
    # 2 network calls × 30 ms of sleep per synthesis: the candidate's RTF exceeds the baseline's
    # by at least the sleep over the audio duration (time.sleep suspends for at least the
    # requested time: Python documentation, time.sleep)
    dur = sf.info(str(DEMO / ALL12[0])).duration
    assert lat["candidate_rtf"] - lat["baseline_rtf"] >= 2 * 0.03 / dur * 0.9
    assert lat["ratio_low"] > 1.1 and cfg["verdict"] == "regression"


def test_ab_mode_checks_stored_features(tmp_path):
    # A/B loads features as the sweep does: stored ones must have the front-end's mel bands
    base = _config(tmp_path, "fast", ALL12[:1], steps=(2,))
    cand = _config(tmp_path, "bad", ALL12[:1], steps=(2,))
    ts = tmp_path / "ts_bad"
    np.save(ts / "pier01.npy", np.zeros((40, 200), dtype=np.float32))
    (ts / "manifest.csv").write_text("id,path,features\npier01,pier01.wav,pier01.npy\n")
    cand.write_text(cand.read_text().replace('path = "ts_bad"', 'path = "ts_bad/manifest.csv"'))
    with pytest.raises(InputError, match="wrong number of mel bands"):
        ab_compare(base, cand, repeats=2)
