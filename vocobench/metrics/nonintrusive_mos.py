"""DNSMOS (``dnsmos``): non-intrusive MOS prediction, P.835 SIG/BAK/OVRL and P.808 heads.

Reddy, Gopal & Cutler 2021, "DNSMOS: a non-intrusive perceptual objective speech quality metric to
evaluate noise suppressors", ICASSP (the P.808 head); Reddy, Gopal & Cutler 2022, "DNSMOS P.835:
a non-intrusive perceptual objective speech quality metric to evaluate noise suppressors",
ICASSP (SIG, BAK, OVRL). The ONNX models are the ones shipped in the ``speechmos`` package; they run
with ``onnxruntime`` on the CPU, one thread, at 16 kHz (the output is resampled to 16 kHz first).
Optional extra: ``pip install 'vocobench[quality]'``.

What it is: convolutional networks trained to predict crowd-sourced ITU-T P.808 / P.835 ratings
of the outputs of *noise suppressors* (the Deep Noise Suppression challenge data: clean speech
with added noise and reverberation, processed by many suppression models). What it is not: a
listening test, nor a model of vocoder artefacts (phasiness, buzziness, pitch or periodicity
errors, metallic timbre) — none of which were in its training data. The reference recording is
not used at all; scores of vocoded speech are a rough indicator only.

Processing, as the reference function ``speechmos.dnsmos.run`` (the DNS challenge's
``dnsmos_local.py``): a clip shorter than 9.01 s is repeated until it is at least that long;
9.01 s windows start every second (``floor(len/16000 − 9.01) + 1`` of them); SIG/BAK/OVRL come
from the raw waveform of each window through the polynomial mappings below, P.808 from a
120-band log-mel spectrogram of the window minus its last 160 samples; each column is the mean
over windows.
"""
from __future__ import annotations

import functools
import importlib.util
import math
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError, MetricUnavailable
from ..params import Choice, Param, Table
from .base import Column, Metric
from .dsp import RESAMPLERS, resample

DNSMOS_RATE = 16000
WINDOW_S = 9.01                     # model input length (DNS challenge dnsmos_local.py)
WINDOW_HOP_S = 1.0
# P.808 head input: log-mel of n_fft 321, hop 160, 120 bands, (power_to_db(ref=max) + 40) / 40.
MEL_N_FFT, MEL_HOP, MEL_BANDS = 321, 160, 120
# Second-order (quadratic) polynomial maps of the raw P.835 outputs to MOS (dnsmos_local.py, non-personalised
# model), coefficients highest power first.
POLY_SIG = (-0.08397278, 1.22083953, 0.0052439)
POLY_BAK = (-0.13166888, 1.60915514, -0.39604546)
POLY_OVRL = (-0.06766283, 1.11546468, 0.04602535)
MODEL_FILES = {"p835": "dnsmos_models/sig_bak_ovr.onnx", "p808": "dnsmos_models/model_v8.onnx"}
EXTRA_HINT = "pip install 'vocobench[quality]'"


def _model_dir() -> Path:
    spec = importlib.util.find_spec("speechmos")
    if spec is None or not spec.submodule_search_locations:
        raise MetricUnavailable(f"dnsmos needs the speechmos package: {EXTRA_HINT}")
    return Path(next(iter(spec.submodule_search_locations)))


@functools.lru_cache(maxsize=None)
def _session(path: str):
    """One single-threaded CPU inference session per model file and process."""
    import onnxruntime as ort

    opts = ort.SessionOptions()
    opts.intra_op_num_threads = 1
    opts.inter_op_num_threads = 1
    return ort.InferenceSession(path, sess_options=opts, providers=["CPUExecutionProvider"])


def windows(x: np.ndarray, sr: int = DNSMOS_RATE) -> np.ndarray:
    """The 9.01 s analysis windows of ``x`` (after repetition of short clips), one per row."""
    length = int(WINDOW_S * sr)
    while x.size < length:
        x = np.append(x, x)
    count = int(np.floor(x.size / sr) - WINDOW_S) + 1
    hop = int(WINDOW_HOP_S * sr)
    rows = [x[int(i * hop): int((i + WINDOW_S) * hop)] for i in range(count)]
    return np.stack([r for r in rows if r.size >= length])


def log_mel(segment: np.ndarray, sr: int = DNSMOS_RATE) -> np.ndarray:
    import librosa

    mel = librosa.feature.melspectrogram(y=segment, sr=sr, n_fft=MEL_N_FFT, hop_length=MEL_HOP,
                                         n_mels=MEL_BANDS)
    return ((librosa.power_to_db(mel, ref=np.max) + 40) / 40).T


def dnsmos_scores(x: np.ndarray) -> dict[str, float]:
    """SIG, BAK, OVRL (P.835) and P.808 MOS of a 16 kHz signal."""
    root = _model_dir()
    segs = windows(np.asarray(x, dtype=np.float64))
    raw = _session(str(root / MODEL_FILES["p835"])).run(
        None, {"input_1": segs.astype(np.float32)})[0]
    mel = np.stack([log_mel(s[:-MEL_HOP]) for s in segs]).astype(np.float32)
    p808 = _session(str(root / MODEL_FILES["p808"])).run(None, {"input_1": mel})[0][:, 0]
    return {"dnsmos_sig": float(np.mean(np.polyval(POLY_SIG, raw[:, 0].astype(np.float64)))),
            "dnsmos_bak": float(np.mean(np.polyval(POLY_BAK, raw[:, 1].astype(np.float64)))),
            "dnsmos_ovrl": float(np.mean(np.polyval(POLY_OVRL, raw[:, 2].astype(np.float64)))),
            "dnsmos_p808": float(np.mean(p808))}


class Dnsmos(Metric):
    """DNSMOS P.835 (SIG, BAK, OVRL) and P.808 of the output alone (the reference is unused)."""

    name = "dnsmos"
    description = "DNSMOS P.835 SIG/BAK/OVRL and P.808, non-intrusive (optional extra 'quality')"
    libraries = ("speechmos", "onnxruntime", "librosa", "soxr")
    requires = ("speechmos", "onnxruntime")
    options_spec = Table("", [
        Param("resampler", Choice(RESAMPLERS), "soxr_vhq", "resampler to 16 kHz"),
    ], entry="option")

    @property
    def sample_rate(self) -> int:
        return DNSMOS_RATE

    @property
    def columns(self) -> tuple[Column, ...]:
        # MOS scale 1..5 (ITU-T P.800 absolute category rating); the mapped outputs of the models
        # are not clipped, so values slightly outside are possible on extreme input.
        mos = (-math.inf, math.inf)
        return (Column("dnsmos_sig", "MOS", True, mos, "DNSMOS P.835 speech signal quality"),
                Column("dnsmos_bak", "MOS", True, mos, "DNSMOS P.835 background noise quality"),
                Column("dnsmos_ovrl", "MOS", True, mos, "DNSMOS P.835 overall quality"),
                Column("dnsmos_p808", "MOS", True, mos, "DNSMOS P.808 overall quality"))

    def _prepare(self, reference: np.ndarray, sr: int) -> None:
        return None                        # non-intrusive: nothing to prepare

    def _score(self, data: Any, estimate: np.ndarray, sr: int) -> dict[str, float]:
        if not np.any(estimate):
            raise MetricUnavailable("dnsmos: estimate is digitally silent")
        return dnsmos_scores(resample(estimate, sr, DNSMOS_RATE, self.options["resampler"]))

    def _variant(self, sample_rate: int | None) -> dict[str, Any]:
        from ..fingerprint import files_fingerprint

        out: dict[str, Any] = {"models": dict(MODEL_FILES), "window_s": WINDOW_S,
                               "window_hop_s": WINDOW_HOP_S, "rate": DNSMOS_RATE,
                               "poly_sig_bak_ovrl": [POLY_SIG, POLY_BAK, POLY_OVRL],
                               "threads": 1, "provider": "CPUExecutionProvider"}
        try:
            root = _model_dir()
            out["model_sha"] = files_fingerprint(root / f for f in MODEL_FILES.values())
        except (MetricUnavailable, InputError):
            out["model_sha"] = None
        return out
