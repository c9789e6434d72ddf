"""Schedule search: split, spaces against their formulas, halving's rungs against Hyperband's
table, the held-out step against a planted lucky schedule, and resume after a kill.

Sources: Karras et al. 2022, Eq. 5 (ρ-spaced noise levels); Ho et al. 2020 (ᾱ_t = ∏(1 − β_s));
Song et al. 2021, Sec. 4.2 (sub-sequences keep the training ᾱ); Li et al. 2017 (Hyperband),
Table 1, bracket s = 4 for R = 81, η = 3 (from memory); stratified sampling with proportional
allocation (Cochran 1977, Sampling Techniques, Ch. 5, from memory).
"""
from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from vocobench.config import load_config, parse_config
from vocobench.schedules import linear, subsequence
from vocobench.search import halving_rungs, make_space, search, split_utterances
from vocobench.testset import Utterance

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "pier-announcements" / "testset"


def _utts(speakers: dict[str, int]) -> list[Utterance]:
    out = []
    for s, n in speakers.items():
        for i in range(n):
            out.append(Utterance(f"{s}-{i}", Path(f"{s}{i}.wav"), f"{hash((s, i)) & 0xffffffff:08x}" * 8,
                                 1.0, 16000, 1, {"speaker": s}))
    return out


def test_split_is_deterministic_stratified_and_disjoint():
    utts = _utts({"a": 4, "b": 4, "c": 2})
    s1 = split_utterances(utts, 0.5, "speaker", seed=3)
    s2 = split_utterances(list(reversed(utts)), 0.5, "speaker", seed=3)
    assert [u.id for u in s1.held_out] == [u.id for u in s2.held_out]
    assert {u.id for u in s1.search}.isdisjoint({u.id for u in s1.held_out})
    assert len(s1.search) + len(s1.held_out) == len(utts)
    held = [u.tags["speaker"] for u in s1.held_out]
    assert (held.count("a"), held.count("b"), held.count("c")) == (2, 2, 1)   # proportional
    assert s1.stratified_by == "speaker"
    other = [split_utterances(utts, 0.5, "speaker", seed=k).describe()["held_out"] for k in range(8)]
    assert len({tuple(o) for o in other}) > 1                        # the seed matters
    assert split_utterances(utts, 0.5, "style").stratified_by is None


def test_karras_space_follows_eq5_and_logsnr_endpoints():
    sp = make_space({"kind": "karras", "logsnr_max": [6.0, 6.5], "logsnr_min": [-8.0, -7.0],
                     "rho": [7.0, 7.5]}, 6, None)
    c = sp.candidate([0.0, 0.0, 0.0])            # λ_max = 6, λ_min = −8, ρ = 7
    ab = c.schedule.alpha_bars[::-1]             # noisiest first, as Eq. 5 indexes them
    sig = np.sqrt((1 - ab) / ab)
    smax, smin, rho = math.exp(4.0), math.exp(-3.0), 7.0
    i = np.arange(6) / 5
    want = (smax ** (1 / rho) + i * (smin ** (1 / rho) - smax ** (1 / rho))) ** rho
    np.testing.assert_allclose(sig, want, rtol=1e-9)


def test_subsequence_space_keeps_training_alpha_bars():
    train = linear(1000)
    sp = make_space({"kind": "subsequence", "train_steps": [1, 200, 400, 600, 800, 1000]}, 6, train)
    c = sp.candidate([0.5 / 6 + k / 6 for k in range(6)])
    np.testing.assert_allclose(c.schedule.alpha_bars, train.alpha_bars[[0, 199, 399, 599, 799, 999]],
                               rtol=1e-12)
    ref = subsequence(train, 5, "uniform")       # Song et al. 2021: same ᾱ, same β
    sp5 = make_space({"kind": "subsequence", "train_steps": [200, 400, 600, 800, 1000]}, 5, train)
    np.testing.assert_allclose(sp5.grid(2)[0].schedule.betas, ref.betas, rtol=1e-12)


def test_grid_sizes_and_invalid_points():
    assert len(make_space({"kind": "geometric"}, 6, None).grid(4)) == 16
    per = make_space({"kind": "per-step", "betas": [0.1, 0.2, 0.3]}, 4, None)
    assert len(per.grid(2)) == math.comb(3 + 4 - 1, 4)      # non-decreasing sequences
    assert per.candidate([0.9, 0.1, 0.1, 0.1]) is None         # β decreasing: refused


def test_halving_rungs_match_hyperband_table():
    assert halving_rungs(81, 81, 1, 3) == [(81, 1), (27, 3), (9, 9), (3, 27), (1, 81)]
    assert halving_rungs(64, 9, 1, 4) == [(64, 1), (16, 4), (4, 9)]


def _pieces(tmp: Path, n_files: int, pieces: int) -> Path:
    import soundfile as sf

    ts = tmp / "ts"
    ts.mkdir()
    rows = ["id,path,speaker"]
    for f in sorted(DEMO.glob("*.wav"))[:n_files]:
        y, sr = sf.read(f)
        for k, part in enumerate(np.array_split(y, pieces)):
            sf.write(ts / f"{f.stem}_{k}.wav", part, sr, subtype="PCM_16")
            rows.append(f"{f.stem}_{k},{f.stem}_{k}.wav,{f.stem}")
    (ts / "manifest.csv").write_text("\n".join(rows) + "\n")
    return ts / "manifest.csv"


def _lucky(tmp: Path, bonus: float | None) -> dict:
    opts = {"noise": 0.6} | ({"bonus_first_beta": bonus} if bonus is not None else {})
    return {"vocoder": {"target": "external_vocoder.lucky:LuckyVocoder", "options": opts},
            "testset": {"path": str(_pieces(tmp, 6, 2))}, "metrics": {"use": ["logmel_l1"]},
            "output": {"save_audio": "none"},
            "search": {"steps": [3], "strategy": "grid", "finalists": 1, "objective": "single",
                       "primary": "logmel_l1",
                       "spaces": [{"kind": "per-step", "betas": [0.1, 0.2, 0.3, 0.4, 0.5]}],
                       "reference": {"name": "ref", "kind": "explicit", "betas": [0.2, 0.3, 0.5]}}}


@pytest.mark.parametrize("bonus", [None, 0.1])
def test_held_out_step_refuses_a_schedule_lucky_on_the_search_split(tmp_path, bonus):
    """All schedules equal but for luck: the search-split winner looks better than the reference
    (it was chosen among 35 on 6 utterances), yet the held-out step must not call it better.
    Control (``bonus``): schedules starting at β = 0.1 really are better; there it must."""
    out = search(parse_config(_lucky(tmp_path, bonus), base_dir=tmp_path), tmp_path / "out",
                 progress=False, plots=False)
    t = json.loads((out / "search" / "search.json").read_text())["targets"][0]
    win = t["finalists"][0]
    optimistic = win["optimistic_search_split"]["logmel_l1"]
    assert optimistic < t["reference_search_split"]["logmel_l1"]        # looks better (lower)
    held = win["held_out"]["logmel_l1"]
    assert held["n"] == 6
    if bonus is None:
        assert held["verdict"] != "better"
    else:
        assert win["betas"][0] == pytest.approx(0.1)
        assert held["verdict"] == "better"


def _resume_config(tmp: Path) -> Path:
    cfg = tmp / "cfg.toml"
    man = _pieces(tmp, 2, 2)
    cfg.write_text(f"""
[vocoder]
target = "vocobench.analytic:AnalyticDenoiser"
options = {{ training_steps = 20 }}
[testset]
path = "{man}"
[sweep]
samplers = ["ddim"]
steps = [3]
[metrics]
use = ["logmel_l1"]
[output]
save_audio = "none"
[search]
steps = [3]
strategy = "grid"
grid_points = 3
spaces = [{{kind = "geometric"}}]
finalists = 1
""")
    return cfg


def _keys(path: Path) -> list[str]:
    return [json.loads(line)["key"] for line in path.read_text().splitlines() if line.strip()]


def test_killed_search_resumes_without_repeating_and_run_reuses_it(tmp_path):
    """Our durability contract (as tests/test_resume.py for ``run``); SIGKILL per POSIX."""
    cfg = _resume_config(tmp_path)
    out = tmp_path / "out"
    items = out / "items.jsonl"
    env_path = str(Path(__file__).resolve().parents[1])
    env = dict(os.environ, PYTHONPATH=env_path, OMP_NUM_THREADS="1")
    p = subprocess.Popen([sys.executable, "-m", "vocobench", "search", str(cfg), "--out", str(out),
                          "-q", "--no-plots"], env=env)
    t0 = time.time()
    while time.time() - t0 < 120 and p.poll() is None and (not items.exists() or len(items.read_text().splitlines()) < 6):
        time.sleep(0.05)
    assert p.poll() is None, "the search ended before it could be killed"
    p.send_signal(signal.SIGKILL)
    p.wait()
    before = set(_keys(items))
    assert len(before) >= 6
    search(load_config(cfg), out,
           progress=False, plots=False)
    s = json.loads((out / "search" / "search.json").read_text())
    keys = _keys(items)
    assert len(keys) - len(set(keys)) <= 1          # at most the item in flight at the kill
    assert s["syntheses_computed_now"] == len(set(keys)) - len(before)
    again = search(load_config(cfg), out,
                   progress=False, plots=False)
    assert json.loads((again / "search" / "search.json").read_text())["syntheses_computed_now"] == 0
    # a later `run` of the pasted winner reuses every synthesis the search made of it: search
    # seed 0 on the search split, fresh seed 1 on the held-out split; only the other half is new
    from vocobench.sweep import run
    win = (out / "search" / "winners.toml").read_text()
    cfg.write_text(cfg.read_text().replace("[search]", win + "\n[search]").replace(
        "[sweep]\n", "[sweep]\nseeds = [0, 1]\n"))
    n = len(_keys(items))
    run(load_config(cfg), out, progress=False, report=False)
    assert len(_keys(items)) == n + 4               # 4 utterances × 2 seeds, 4 from the search


@pytest.mark.parametrize("strategy", ["random", "local", "tpe", "cmaes"])
def test_budget_stops_every_strategy(tmp_path, strategy):
    """A synthesis budget is a ceiling: the search stops at it and says so (our contract)."""
    if strategy in ("tpe", "cmaes"):
        pytest.importorskip("optuna", reason="strategies tpe/cmaes need the 'search' extra (optuna)")
    if strategy == "cmaes":
        pytest.importorskip("cmaes", reason="strategy cmaes needs the 'search' extra (cmaes)")
    cfg = _resume_config(tmp_path)
    cfg.write_text(cfg.read_text().replace('strategy = "grid"', f'strategy = "{strategy}"\n'
                                           'max_syntheses = 7\ncandidates = 6'))
    out = search(load_config(cfg), tmp_path / "out", progress=False, plots=False)
    t = json.loads((out / "search" / "search.json").read_text())["targets"][0]
    assert t["budget"]["syntheses_asked"] == 7
    assert t["stopped"] == "budget spent"
    assert len(t["finalists"]) == 1                  # 2 search utterances: 3 candidates scored in full


def test_nfe_budget_gives_each_sampler_its_most_steps(tmp_path):
    """Heun spends 2N − 1 evaluations (Karras et al. 2022, Alg. 1): a budget of 5 buys 3 steps;
    DDIM spends N: 5 steps. The winner's β list has that many entries. (Two worker processes.)"""
    cfg = _resume_config(tmp_path)
    cfg.write_text(cfg.read_text().replace('steps = [3]\nstrategy = "grid"', 'nfe = [5]\n'
                                           'strategy = "random"\ncandidates = 2').replace(
        'samplers = ["ddim"]\nsteps = [3]', 'samplers = ["heun", "ddim"]\nnfe = [4]'))
    out = search(load_config(cfg), tmp_path / "out", progress=False, plots=False, workers=2)
    ts = json.loads((out / "search" / "search.json").read_text())["targets"]
    got = {t["sampler"]: (t["steps"], t["nfe"], len(t["finalists"][0]["betas"])) for t in ts}
    assert got == {"heun": (3, 5, 3), "ddim": (5, 5, 5)}


def test_pareto_front_and_margins_follow_their_definitions():
    """Pareto dominance: no worse on every metric, better on one (Pareto 1906, textbook form);
    a margin bounds how much worse than the reference a candidate may be, in the metric's unit."""
    from vocobench.search import Objective, pareto_front

    obj = Objective("pareto", "stoi", ["stoi", "logmel_l1"], {"stoi": True, "logmel_l1": False})
    pts = [{"stoi": 0.9, "logmel_l1": 1.0}, {"stoi": 0.8, "logmel_l1": 0.5},
           {"stoi": 0.85, "logmel_l1": 1.2}, {"stoi": 0.9, "logmel_l1": 1.0},
           {"stoi": math.nan, "logmel_l1": 0.1}]
    assert pareto_front(pts, obj) == [0, 1, 3]
    c = Objective("constrained", "stoi", ["stoi"], obj.higher, {"logmel_l1": 0.15},
                  reference={"stoi": 0.8, "logmel_l1": 1.0})
    assert c.value({"stoi": 0.9, "logmel_l1": 1.14}) == pytest.approx(0.9)
    assert c.value({"stoi": 0.9, "logmel_l1": 1.16}) == -math.inf
    assert Objective("single", "logmel_l1", [], obj.higher).value({"logmel_l1": 0.7}) == -0.7


def test_wall_clock_budget_stops_the_search(tmp_path):
    """A time budget already spent lets no candidate through; the summary says so."""
    cfg = _resume_config(tmp_path)
    cfg.write_text(cfg.read_text().replace('strategy = "grid"', 'strategy = "grid"\nmax_seconds = 1e-9'))
    out = search(load_config(cfg), tmp_path / "out", progress=False, plots=False)
    t = json.loads((out / "search" / "search.json").read_text())["targets"][0]
    assert (t["stopped"], t["budget"]["syntheses_asked"], t["finalists"]) == ("budget spent", 0, [])
    assert "No candidate was scored" in (out / "search" / "summary.md").read_text()


def test_pareto_objective_confirms_only_non_dominated_candidates(tmp_path):
    cfg = _resume_config(tmp_path)
    cfg.write_text(cfg.read_text().replace('use = ["logmel_l1"]', 'use = ["logmel_l1", "stoi"]')
                   .replace('finalists = 1', 'finalists = 2\nobjective = "pareto"\n'
                            'primary = "stoi"\nmetrics = ["stoi", "logmel_l1"]'))
    out = search(load_config(cfg), tmp_path / "out", progress=False, plots=False)
    t = json.loads((out / "search" / "search.json").read_text())["targets"][0]
    fin = [f["optimistic_search_split"] for f in t["finalists"]]
    assert fin
    for a in fin:                   # no finalist dominates another (stoi up, logmel_l1 down)
        for b in fin:
            assert not (a["stoi"] >= b["stoi"] and a["logmel_l1"] <= b["logmel_l1"]
                        and (a["stoi"] > b["stoi"] or a["logmel_l1"] < b["logmel_l1"]))
    assert all(set(f["held_out"]) == {"stoi", "logmel_l1"} for f in t["finalists"])
