"""Samplers in a sweep: grids by network evaluations, the noise-law check before a run, the
schedule an adaptive sampler used in the item record, and `vocobench check` on the declared
prediction."""
from __future__ import annotations

import math

import numpy as np
import pytest

from vocobench.analytic import AnalyticDenoiser
from vocobench.check import check_object
from vocobench.config import parse_config
from vocobench.contracts import Plugin
from vocobench.errors import InputError
from vocobench.samplers import sampler_nfe
from vocobench.sweep import Worker, build_grid, prepare

SAMPLERS = ["ddim", "heun", "dpm-solver-3", "dpmpp-3m", "pndm"]


def _config(tmp_path, sweep: dict, target: str = "vocobench.analytic:AnalyticDenoiser", **extra):
    return parse_config({"vocoder": {"target": target}, "testset": {"path": "ts"},
                         "sweep": {"samplers": SAMPLERS, **sweep}, "metrics": {"use": ["signal"]},
                         **extra}, base_dir=tmp_path, source="cfg.toml")


def test_nfe_grid_spends_at_most_the_budget(tmp_path):
    cfg = _config(tmp_path, {"nfe": [3, 6, 10], "schedule": [
        {"name": "k", "kind": "karras"}, {"name": "fixed", "kind": "kong2021-fast6"}]})
    assert cfg.nfe == [3, 6, 10]
    grid = build_grid(cfg, Plugin.wrap(AnalyticDenoiser()))
    by_budget = [g for g in grid if g.spec.name == "k"]
    keys = [(g.spec.name, g.sampler, g.steps) for g in grid]
    assert len(keys) == len(set(keys))                      # one job set per configuration
    for budget in cfg.nfe:
        for s in SAMPLERS:
            # the most steps whose evaluations fit: Heun 2N − 1 (Karras et al. 2022, Alg. 1),
            # DPM-Solver-3 3N − 2 (Lu et al. 2022, Alg. 2), PNDM's 4-evaluation warm-up steps
            n = max(k for k in range(1, budget + 1) if sampler_nfe(s, k) <= budget) \
                if sampler_nfe(s, 1) <= budget else 1
            hit = [g for g in by_budget if g.sampler == s and g.steps == n]
            assert hit and hit[0].nfe == sampler_nfe(s, n) <= budget, (s, budget, n)
    heun = sorted(g.steps for g in by_budget if g.sampler == "heun")
    assert heun == [2, 3, 5]                                 # 2N − 1 ≤ 3, 6, 10
    # a fixed-length schedule keeps its length, once per sampler
    assert sorted(g.sampler for g in grid if g.spec.name == "fixed") == sorted(SAMPLERS)


def test_steps_and_nfe_together_are_refused(tmp_path):
    with pytest.raises(InputError) as e:
        _config(tmp_path, {"nfe": [4], "steps": [4]})
    assert e.value.field == "sweep.nfe"


class GammaDemo(AnalyticDenoiser):
    noise_law = "gamma"
    gamma_theta0 = 0.001


def test_gaussian_sampler_for_a_gamma_denoiser_fails_before_the_run(tmp_path):
    cfg = _config(tmp_path, {"steps": [2]})
    with pytest.raises(InputError) as e:
        build_grid(cfg, Plugin.wrap(GammaDemo()))
    assert "noise_law" in str(e.value) and e.value.source == "cfg.toml"


def test_adaptive_item_records_the_schedule_it_used(tmp_path, speech_folder):
    (tmp_path / "ts").symlink_to(speech_folder)
    cfg = _config(tmp_path, {"steps": [4], "samplers": ["dpmpp-2m"]},
                  sampler_options={"dpmpp-2m": {"replan_at": [0.5]}})
    setup = prepare(cfg, tmp_path / "run")
    rec = Worker(setup).process(setup.jobs[0])
    assert rec["status"] == "ok", rec["failure"]
    used = rec["schedule_used"]
    assert len(used["alpha_bar"]) == 4 and used["replanned"][0]["step"] == 2
    plain = _config(tmp_path, {"steps": [4], "samplers": ["dpmpp-2m"]})
    setup = prepare(plain, tmp_path / "run2")
    assert "schedule_used" not in Worker(setup).process(setup.jobs[0])


class Reparameterised(AnalyticDenoiser):
    """The demo model's exact ε̂ re-expressed as x̂_0 or v̂ (Salimans & Ho 2022): the same model."""

    def __init__(self, prediction: str, declared: str | None = None) -> None:
        super().__init__(conditioning="level")
        self.kind, self.prediction = prediction, declared or prediction

    def predict_noise(self, x_t, features, t):
        eps = super().predict_noise(x_t, features, t).astype(np.float64)
        a = np.asarray(t, np.float64)[:, None]
        s = np.sqrt(1 - a ** 2)
        x0 = (np.asarray(x_t, np.float64) - s * eps) / a
        return {"eps": eps, "x0": x0, "v": a * eps - s * x0}[self.kind]


@pytest.mark.parametrize("kind", ["eps", "x0", "v"])
def test_check_verifies_the_declared_prediction(kind):
    ok = [f for f in check_object(Reparameterised(kind)) if f.what == "declared prediction"]
    assert ok and ok[0].ok and f"'{kind}'" in ok[0].detail
    wrong = {"eps": "v", "x0": "eps", "v": "x0"}[kind]
    bad = [f for f in check_object(Reparameterised(kind, wrong)) if f.what == "declared prediction"]
    assert not bad[0].ok and f"reads as '{kind}'" in bad[0].detail
    # the samplers convert exactly: same output as the ε-model, to rounding
    fe = Reparameterised(kind).frontend
    feats = fe(np.random.default_rng(0).standard_normal(4096).astype(np.float32) * 0.05)
    sched = Plugin.wrap(AnalyticDenoiser()).training_schedule
    from vocobench.schedules import karras

    grid = karras(5, sched)
    want = Plugin.wrap(Reparameterised("eps")).synthesizer("dpmpp-2m")(feats, grid,
                                                                         np.random.default_rng(3))
    got = Plugin.wrap(Reparameterised(kind)).synthesizer("dpmpp-2m")(feats, grid,
                                                                       np.random.default_rng(3))
    assert np.linalg.norm(got - want) <= 1e-5 * np.linalg.norm(want) + 1e-9
    assert math.isfinite(float(np.sum(got)))
