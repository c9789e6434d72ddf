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
from .schedules import cosine, subsequence

PROBE_SECONDS = 0.5
PROBE_STEPS = 3


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
