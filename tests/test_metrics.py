"""Metric API, registry, options, length policy, failure paths and the ``signal`` checks."""
from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest

from test_metrics_synth import speech_like
from vocobench.errors import InputError, ItemFailure, MetricUnavailable
from vocobench.metrics import (DEFAULT_METRICS, REGISTRY, Column, LengthPolicy, Metric,
                               available_metrics, build_metrics)
from vocobench.metrics.base import missing_requirements

# Metrics whose optional extra is installed; the others are skipped with the reason shown.
INSTALLED = [n for n in REGISTRY if not missing_requirements(n)]
EVERY_METRIC = [n if n in INSTALLED else pytest.param(n, marks=pytest.mark.skip(
    reason=f"needs {', '.join(missing_requirements(n))} (optional extra 'quality')"))
    for n in REGISTRY]

SR = 22050


# -- registry / options ------------------------------------------------------------------------
def test_unknown_metric_lists_valid_names():
    # Brief: unknown name -> InputError listing the valid names (project convention).
    with pytest.raises(InputError) as exc:
        build_metrics(["mcd", "pesq_xb"], source="config.toml")
    msg = str(exc.value)
    assert "pesq_xb" in msg and "config.toml" in msg
    for name in REGISTRY:
        assert name in msg
    assert exc.value.field == "metrics.use"


def test_unknown_option_is_named():
    with pytest.raises(InputError) as exc:
        build_metrics(["mcd"], options={"mcd": {"ordr": 24}}, source="config.toml")
    assert "ordr" in str(exc.value) and exc.value.field == "metrics.options.mcd.ordr"


@pytest.mark.parametrize("opts", [{"order": 0}, {"order": 2.5}, {"order": True},
                                  {"alignment": "fast"}, {"silence_db": 3.0}])
def test_bad_option_values(opts):
    with pytest.raises(InputError):
        build_metrics(["mcd"], options={"mcd": opts})


def test_options_of_unselected_metric_are_checked_and_names_unique():
    with pytest.raises(InputError):
        build_metrics(["stoi"], options={"mcdd": {}})
    with pytest.raises(InputError):
        build_metrics(["stoi"], options={"pesq_wb": {"resampler": "linear"}})
    with pytest.raises(InputError):
        build_metrics(["stoi", "stoi"])
    with pytest.raises(InputError):
        build_metrics("stoi")


def test_build_defaults_and_options():
    ms = build_metrics(list(DEFAULT_METRICS), options={"mcd": {"order": 12}})
    assert [m.name for m in ms] == ["mcd", "pesq_wb", "stoi"]
    assert all(isinstance(m, Metric) for m in ms)
    assert ms[0].options["order"] == 12
    assert ms[1].sample_rate == 16000 and ms[0].sample_rate is None


def test_available_metrics_listing_is_complete_and_consistent():
    listing = available_metrics()
    assert [d["name"] for d in listing] == list(REGISTRY)
    columns = [c["name"] for d in listing for c in d["columns"]]
    assert len(columns) == len(set(columns)), "column names must be unique across metrics"
    for d in listing:
        assert d["description"] and "\n" not in d["description"]
        for c in d["columns"]:
            lo, hi = c["valid_range"]
            assert lo < hi and c["higher_is_better"] in (True, False, None)


def test_variant_is_json_and_resolves_rate_dependent_settings():
    for m in build_metrics(INSTALLED):
        json.dumps(m.variant(), allow_nan=False)
        json.dumps(m.variant(SR), allow_nan=False)
    mcd = build_metrics(["mcd"])[0].variant(SR)
    # SPTK's alpha helper (pysptk.util.mcepalpha) gives 0.455 at 22.05 kHz (checked in
    # test_metrics_mcd.py against the library itself).
    assert mcd["alpha"] == pytest.approx(0.455) and mcd["options"]["order"] == 24


def test_import_is_lazy():
    # Brief: importing and building metrics must not import librosa / pesq / pystoi / soxr.
    code = (f"import sys, vocobench.metrics as m; m.build_metrics({INSTALLED!r}); "
            "m.available_metrics(); "
            "print([k for k in ('librosa', 'pesq', 'pystoi', 'soxr', 'onnxruntime', 'speechmos', "
            "'parselmouth') if k in sys.modules])")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


# -- prepare / score contract -----------------------------------------------------------------
def test_score_contract_and_unavailable_paths():
    x = speech_like(SR, 1.0)
    m = build_metrics(["lsd"])[0]
    state = m.prepare(x, SR)
    assert set(m.score(state, x, SR)) == {c.name for c in m.columns}
    with pytest.raises(ValueError):
        m.score(state, np.concatenate([x, x[:10]]), SR)   # longer: apply the length policy first
    # shorter (trim policy): scored against the reference cut to the same length
    y = speech_like(SR, 1.0, seed=2)[:-300]
    assert m.score(state, y, SR) == m.score(m.prepare(x[:-300], SR), y, SR)
    with pytest.raises(ValueError):
        m.score(state, x, 16000)
    bad = x.copy()
    bad[100] = np.nan
    with pytest.raises(MetricUnavailable):
        m.score(state, bad, SR)
    nan_ref = m.prepare(bad, SR)                   # never raises for data problems ...
    with pytest.raises(MetricUnavailable):         # ... the reason surfaces at score time
        m.score(nan_ref, x, SR)


@pytest.mark.parametrize("name", EVERY_METRIC)
def test_every_metric_survives_silence_and_tiny_inputs(name):
    # Brief: never crash for a legit-but-unscorable input (silent or very short audio).
    m = build_metrics([name])[0]
    for ref, est in [(np.zeros(SR, np.float32), np.zeros(SR, np.float32)),
                     (speech_like(SR, 1.0), np.zeros(SR, np.float32)),
                     (speech_like(SR, 0.01), speech_like(SR, 0.01, seed=2))]:
        state = m.prepare(ref, SR)
        try:
            values = m.score(state, est, SR)
        except MetricUnavailable as exc:
            assert str(exc)
        else:
            assert set(values) == {c.name for c in m.columns}


def test_metric_identity_scores():
    # Identical signals: zero distance (definitions), STOI = 1 (correlation of identical
    # envelopes, Taal et al. 2011), no level difference.
    x = speech_like(SR, 2.0)
    ms = build_metrics(["mcd", "mcd_mfcc", "lsd", "mrstft", "logmel_l1", "stoi", "estoi"])
    for m in ms:
        v = m.score(m.prepare(x, SR), x, SR)
        for c in m.columns:
            if c.name.endswith("_frames"):
                continue
            expected = 1.0 if c.higher_is_better else 0.0
            assert v[c.name] == pytest.approx(expected, abs=1e-9), c.name


# -- length policy -----------------------------------------------------------------------------
def test_length_policy_trim_and_pad():
    ref = np.arange(1000, dtype=np.float32)
    est = np.arange(1100, dtype=np.float32)
    r, e, info = LengthPolicy("trim", 2.0).apply(ref, est, 256)
    assert r.size == e.size == 1000 and info["length_diff"] == 100
    assert not info["reference_changed"]
    r, e, info = LengthPolicy("trim").apply(ref, est[:900], 256)
    assert r.size == e.size == 900 and info["length_diff"] == -100 and info["reference_changed"]
    r, e, info = LengthPolicy("pad").apply(ref, est[:900], 256)
    assert r is ref and e.size == 1000 and np.all(e[900:] == 0) and np.array_equal(e[:900],
                                                                                    est[:900])
    r, e, info = LengthPolicy("pad").apply(ref, est, 256)
    assert r is ref and np.array_equal(e, est[:1000])


def test_length_policy_tolerance():
    ref = np.zeros(10000, np.float32)
    pol = LengthPolicy("trim", tolerance_hops=2.0)
    pol.apply(ref, np.zeros(10512, np.float32), 256)         # exactly 2 hops: allowed
    with pytest.raises(ItemFailure, match="513 samples longer.*tolerance is 512"):
        pol.apply(ref, np.zeros(10513, np.float32), 256)
    with pytest.raises(ItemFailure, match="600 samples shorter"):
        pol.apply(ref, np.zeros(9400, np.float32), 256)
    assert pol.describe()["mode"] == "trim" and pol.describe()["tolerance_hops"] == 2.0
    with pytest.raises(InputError):
        LengthPolicy("stretch")
    with pytest.raises(InputError):
        LengthPolicy("pad", tolerance_hops=-1)


# -- signal checks -----------------------------------------------------------------------------
def test_signal_checks_values():
    x = speech_like(SR, 1.0, level=0.5)
    m = build_metrics(["signal"])[0]
    state = m.prepare(x, SR)
    v = m.score(state, 0.5 * x, SR)
    # 20·log10(0.5) = −6.0206 dB (definition of the decibel)
    assert v["signal_level_db"] == pytest.approx(20 * math.log10(0.5), abs=1e-6)
    assert v["signal_peak"] == pytest.approx(0.25, rel=1e-6)
    y = np.clip(4.0 * x, -1.0, 1.0) + np.float32(0.1)
    y[:10] = np.nan
    v = m.score(state, y.astype(np.float32), SR)
    finite = y[10:]
    assert v["signal_nonfinite"] == pytest.approx(10 / y.size)
    assert v["signal_clip"] == pytest.approx(np.mean(np.abs(finite) >= 0.999))
    assert v["signal_clip"] > 0
    assert v["signal_dc"] == pytest.approx(float(np.mean(finite, dtype=np.float64)), abs=1e-7)


def test_column_is_a_plain_record():
    c = Column("x", "dB", False, (0.0, 1.0), "d")
    assert c.as_dict() == {"name": "x", "unit": "dB", "higher_is_better": False,
                           "valid_range": (0.0, 1.0), "description": "d"}


def test_metrics_and_states_pickle():
    # The sweep may ship metrics and prepared states to worker processes (dask).
    import pickle

    x = speech_like(SR, 1.0)
    y = speech_like(SR, 1.0, seed=2)
    for m in build_metrics(["mcd", "lsd", "signal", "stoi"]):
        state = m.prepare(x, SR)
        m2, state2 = pickle.loads(pickle.dumps((m, state)))
        assert m2.score(state2, y, SR) == m.score(state, y, SR)


def test_metric_without_its_extra_is_a_config_error(monkeypatch):
    # An optional extra that is missing must stop the run before it starts, naming the install.
    import importlib.util

    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec",
                        lambda name, *a: None if name == "onnxruntime" else real(name, *a))
    with pytest.raises(InputError, match=r"onnxruntime.*vocobench\[quality\]") as exc:
        build_metrics(["stoi", "dnsmos"], source="cfg.toml")
    assert exc.value.field == "metrics.use"
    assert "dnsmos" in [d["name"] for d in available_metrics()]     # still listed
