"""Contract check: run a user's vocoder or denoiser on a short input and explain every violation.

Meant to run before a long sweep (``vocobench check TARGET``), in the spirit of a conformance test
users run on their own object.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from .contracts import Plugin, instantiate, resolve, to_numpy
from .errors import InputError
from .metrics import DEFAULT_TOLERANCE_HOPS, LengthPolicy
from .outputs import waveform_problems
from .samplers import PREDICTIONS, Pred, fractional_steps
from .schedules import cosine, subsequence

PROBE_SECONDS = 0.5
PROBE_STEPS = 3
# Prediction check: the probe is noised to these ᾱ, where √ᾱ and √(1−ᾱ) differ enough for ε, x_0
# and v readings of one output to disagree (our choice); a reading is decided when its x_0 error
# is below this fraction of the next best reading's (our choice).
PREDICTION_ALPHA_BARS = (0.2, 0.5)
PREDICTION_MARGIN = 0.5


@dataclass(frozen=True)
class Finding:
    ok: bool
    what: str
    detail: str = ""

    def __str__(self) -> str:
        return f"[{'ok' if self.ok else 'FAIL'}] {self.what}" + (f": {self.detail}" if self.detail else "")


def probe_signal(sample_rate: int, seconds: float = PROBE_SECONDS) -> np.ndarray:
    """A speech-like probe: harmonic glide (120→180 Hz) with a 4 Hz syllabic envelope."""
    t = np.arange(int(seconds * sample_rate)) / sample_rate
    f0 = 120 + 60 * t / seconds
    phase = 2 * np.pi * np.cumsum(f0) / sample_rate
    y = sum(np.sin(k * phase) / k for k in range(1, 16) if k * f0[-1] < sample_rate / 2)
    env = 0.5 - 0.5 * np.cos(2 * np.pi * 4 * t)
    return (0.3 * env * y / np.max(np.abs(y))).astype(np.float32)


def check_target(target: str, options: Mapping[str, Any] | None = None,
                 search_path: Sequence[str | Path] = (),
                 tolerance_hops: float = DEFAULT_TOLERANCE_HOPS) -> list[Finding]:
    try:
        obj = instantiate(resolve(target, search_path), dict(options or {}), target)
    except InputError as e:          # import, attribute, options or a raising constructor
        return [Finding(False, "load", str(e))]
    return check_object(obj, target, tolerance_hops)


def check_object(obj: Any, name: str = "",
                 tolerance_hops: float = DEFAULT_TOLERANCE_HOPS) -> list[Finding]:
    """Findings for a vocoder/denoiser instance; all ``ok`` means the contract holds."""
    try:
        plugin = Plugin.wrap(obj, name)
    except InputError as e:
        return [Finding(False, "declared attributes", str(e))]
    out = [Finding(True, "declared attributes",
                   f"{plugin.kind}, {plugin.sample_rate} Hz, hop {plugin.frontend.hop_length}")]
    fe = plugin.frontend
    if fe.sample_rate != plugin.sample_rate:
        out.append(Finding(False, "sample rate",
                           f"front-end runs at {fe.sample_rate} Hz but the vocoder declares "
                           f"{plugin.sample_rate} Hz; features would describe the wrong band"))
    feats = fe(probe_signal(fe.sample_rate))
    sched = (subsequence(plugin.training_schedule, PROBE_STEPS)
             if plugin.training_schedule is not None and len(plugin.training_schedule) >= PROBE_STEPS
             else cosine(PROBE_STEPS))
    if plugin.kind == "denoiser":
        out += _check_denoiser(plugin, feats)
        out += _check_prediction(plugin, feats)
    for sampler in plugin.samplers():
        out += _check_synthesis(plugin, sampler, feats, sched, tolerance_hops)
    return out


def _check_denoiser(plugin: Plugin, feats: np.ndarray) -> list[Finding]:
    n = plugin.frontend.expected_samples(feats.shape[-1])
    x = np.random.default_rng(0).standard_normal((2, n)).astype(np.float32)
    f2 = np.stack([feats, feats])
    t = (np.array([len(plugin.training_schedule) // 2] * 2, dtype=np.float64)
         if plugin.conditioning == "step" else np.array([0.5, 0.5]))
    try:
        eps = to_numpy(plugin.obj.predict_noise(x, f2, t))
    except Exception as e:
        return [Finding(False, "predict_noise on a batch of 2", f"raised {type(e).__name__}: {e}")]
    if eps.shape != x.shape:
        return [Finding(False, "predict_noise output shape",
                        f"returned {eps.shape} for x_t of shape {x.shape}; ε̂ must match x_t")]
    res = [Finding(True, "predict_noise output shape", str(eps.shape))]
    if not np.all(np.isfinite(eps)):
        res.append(Finding(False, "predict_noise finite", "ε̂ has NaN/Inf values"))
    try:
        one = to_numpy(plugin.obj.predict_noise(x[:1], f2[:1], t[:1]))
        if one.shape == (1, n) and not np.allclose(one[0], eps[0], rtol=1e-4, atol=1e-5):
            res.append(Finding(False, "batch-aware",
                               "item 0 of a batch of 2 differs from the same item alone"))
        else:
            res.append(Finding(True, "batch-aware"))
    except Exception as e:
        res.append(Finding(False, "batch of 1", f"raised {type(e).__name__}: {e}"))
    return res


def _check_prediction(plugin: Plugin, feats: np.ndarray) -> list[Finding]:
    """Does the output read best as the declared prediction? The probe signal x_0 is noised to a
    few levels; each reading (ε, x_0, v; Salimans & Ho 2022) of the output gives an x̂_0 and the
    one closest to x_0 should be the declared one. Undecided (ok) when no reading clearly wins,
    e.g. for a model that does not denoise speech-like input."""
    n = plugin.frontend.expected_samples(feats.shape[-1])
    x0 = np.resize(probe_signal(plugin.sample_rate), n).astype(np.float64)[None]
    rng = np.random.default_rng(0)
    err = dict.fromkeys(PREDICTIONS, 0.0)
    for ab in PREDICTION_ALPHA_BARS:
        x_t = np.sqrt(ab) * x0 + np.sqrt(1 - ab) * rng.standard_normal(x0.shape)
        if plugin.conditioning == "level":
            t = np.array([np.sqrt(ab)])
        else:
            t, clamped = fractional_steps(plugin.training_schedule, np.array([ab]))
            if clamped:
                return [Finding(True, "declared prediction", f"not checked: ᾱ = {ab} lies outside "
                                "the training schedule")]
        try:
            out = to_numpy(plugin.obj.predict_noise(x_t.astype(np.float32), feats[None], t))
        except Exception as e:
            return [Finding(False, "declared prediction", f"predict_noise raised {type(e).__name__}: {e}")]
        if np.shape(out) != x_t.shape or not np.all(np.isfinite(out)):
            return []                        # reported by the output checks above
        for kind in PREDICTIONS:
            err[kind] += float(np.sum((Pred(np.asarray(out, np.float64), x_t, ab, kind).x0 - x0) ** 2))
    best, second = sorted(PREDICTIONS, key=err.__getitem__)[:2]
    rel = {k: np.sqrt(v / (len(PREDICTION_ALPHA_BARS) * np.sum(x0 ** 2))) for k, v in err.items()}
    detail = ", ".join(f"{k}: {rel[k]:.2f}" for k in PREDICTIONS) + " (relative x̂_0 error per reading)"
    if err[best] > PREDICTION_MARGIN ** 2 * err[second]:
        return [Finding(True, "declared prediction", f"undecided on the probe; {detail}")]
    if best != plugin.prediction:
        return [Finding(False, "declared prediction",
                        f"declares prediction = '{plugin.prediction}' but the output reads as "
                        f"'{best}'; {detail}")]
    return [Finding(True, "declared prediction", f"'{best}'; {detail}")]


def _check_synthesis(plugin: Plugin, sampler: str, feats: np.ndarray, sched: Any,
                     tolerance_hops: float) -> list[Finding]:
    tag = f"synthesis ({sampler})"
    fn = plugin.synthesizer(sampler)
    try:
        a = fn(feats, sched, np.random.default_rng(1))
        b = fn(feats, sched, np.random.default_rng(1))
        c = fn(feats, sched, np.random.default_rng(2))
    except Exception as e:
        return [Finding(False, tag, f"raised {type(e).__name__}: {e}")]
    try:
        a, b, c = (to_numpy(v) for v in (a, b, c))
    except Exception as e:
        return [Finding(False, f"{tag} output type", f"not array-like: {e}")]
    res = []
    problems = waveform_problems(a)
    if "shape" in problems:
        return [Finding(False, f"{tag} output shape", problems["shape"])]
    if "dtype" in problems:
        res.append(Finding(False, f"{tag} dtype", problems["dtype"]))
    expected = plugin.frontend.expected_samples(feats.shape[-1])
    tol = LengthPolicy(tolerance_hops=tolerance_hops).tolerance_samples(plugin.frontend.hop_length)
    if abs(a.size - expected) > tol:
        res.append(Finding(False, f"{tag} output length",
                           f"{a.size} samples for {feats.shape[-1]} frames; expected {expected} "
                           f"(frames × hop {plugin.frontend.hop_length}) within ±{tol}"))
    else:
        res.append(Finding(True, f"{tag} output length", f"{a.size} samples, expected {expected}"))
    finite = "finite" not in problems
    res.append(Finding(finite, f"{tag} finite samples", problems.get("finite", "")))
    if finite and a.size and np.max(np.abs(a)) > 4.0:
        res.append(Finding(False, f"{tag} level",
                           f"peak {np.max(np.abs(a)):.1f} (full scale is 1.0): output is diverging"))
    same = a.shape == b.shape and np.array_equal(a, b, equal_nan=True)
    res.append(Finding(same, f"{tag} fixed seed reproducible",
                       "" if same else "two calls with the same seed gave different audio; draw all "
                       "randomness from the generator passed in"))
    differs = a.shape != c.shape or not np.array_equal(a, c, equal_nan=True)
    res.append(Finding(differs, f"{tag} seed used",
                       "" if differs else "different seeds gave identical audio: the generator "
                       "passed in is ignored"))
    return res


# -- metric objects (``vocobench check --metric TARGET``) ------------------------------------------
METRIC_PROBE_RATE = 16000
METRIC_PROBE_SECONDS = 1.0
METRIC_PROBE_SNR_DB = 10.0


def check_metric_target(target: str, options: Mapping[str, Any] | None = None,
                        search_path: Sequence[str | Path] = ()) -> list[Finding]:
    """Load a metric named ``package.module:object`` / ``file.py:object`` and check it."""
    import sys

    from .metrics import build_metrics

    for p in reversed([str(Path(p).resolve()) for p in search_path]):
        if p not in sys.path:
            sys.path.insert(0, p)
    try:
        metric = build_metrics([target], {target: dict(options)} if options else None)[0]
    except InputError as e:
        return [Finding(False, "load", str(e))]
    return check_metric(metric)


def check_metric(metric: Any) -> list[Finding]:
    """Findings for a Metric: declared columns, identity score, determinism, declared range and
    NaN handling on a speech-like probe (clean, and with white noise at 10 dB SNR)."""
    from .errors import MetricUnavailable

    cols = list(metric.columns)
    out = [Finding(True, "declared columns", ", ".join(
        f"{c.name} [{c.unit}] {_direction(c.higher_is_better)} {list(c.valid_range)}" for c in cols))]
    sr = metric.sample_rate or METRIC_PROBE_RATE
    ref = probe_signal(sr, METRIC_PROBE_SECONDS).astype(np.float64)
    noise = np.random.default_rng(0).standard_normal(ref.size)
    noisy = ref + noise * np.sqrt(np.mean(ref ** 2) / 10 ** (METRIC_PROBE_SNR_DB / 10))

    def scored(est: np.ndarray, what: str) -> dict[str, float] | Finding:
        try:
            return metric.score(metric.prepare(ref, sr), est, sr)
        except MetricUnavailable as e:
            return Finding(False, what, f"unavailable on a {METRIC_PROBE_SECONDS:g} s speech-like "
                                        f"probe at {sr} Hz: {e}")
        except Exception as e:
            return Finding(False, what, f"raised {type(e).__name__}: {e}")

    same, degraded = scored(ref, "identity score"), scored(noisy, "score of a noisy copy")
    bad = [v for v in (same, degraded) if isinstance(v, Finding)]
    if bad:
        return out + bad
    worse = [c.name for c in cols if c.higher_is_better is not None and
             np.isfinite(same[c.name]) and np.isfinite(degraded[c.name]) and
             (same[c.name] < degraded[c.name]) == c.higher_is_better and
             same[c.name] != degraded[c.name]]
    out.append(Finding(not worse, "identity score",
                       f"the output identical to the reference scores worse than a copy with "
                       f"{METRIC_PROBE_SNR_DB:g} dB noise on {worse}: direction or sign wrong?"
                       if worse else ", ".join(f"{k} {v:.4g}" for k, v in same.items())))
    again = scored(noisy, "determinism")
    equal = not isinstance(again, Finding) and all(
        np.array_equal(again[k], degraded[k], equal_nan=True) for k in degraded)
    out.append(Finding(equal, "determinism", "" if equal else
                       "two scorings of the same input differ; seed or remove randomness"))
    outside = [f"{c.name}={v[c.name]:.4g}" for v in (same, degraded) for c in cols
               if np.isfinite(v[c.name]) and not c.valid_range[0] <= v[c.name] <= c.valid_range[1]]
    out.append(Finding(not outside, "declared range",
                       f"values outside the declared range: {', '.join(outside)}" if outside else ""))
    nan_est = noisy.copy()
    nan_est[ref.size // 2] = np.nan
    try:
        values = metric.score(metric.prepare(ref, sr), nan_est, sr)
        finite = [k for k, v in values.items() if np.isfinite(v)]
        out.append(Finding(not finite, "NaN handling", f"an estimate with a NaN sample gave "
                           f"finite values for {finite}; raise MetricUnavailable instead"
                           if finite else "NaN out for NaN in"))
    except MetricUnavailable as e:
        out.append(Finding(True, "NaN handling", f"unavailable: {e}"))
    except Exception as e:
        out.append(Finding(False, "NaN handling", f"an estimate with a NaN sample raised "
                           f"{type(e).__name__}: {e}; raise MetricUnavailable instead"))
    return out


def _direction(higher: bool | None) -> str:
    return {True: "higher is better", False: "lower is better", None: "diagnostic"}[higher]
