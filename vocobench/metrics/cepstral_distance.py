"""Mel-cepstral distortion (``mcd``) and an MFCC-based variant (``mcd_mfcc``).

Both use the distance of Kubichek 1993 ("Mel-cepstral distance measure for objective speech
quality assessment", IEEE PACRIM), ``MCD = (10/ln 10)·√(2·Σ_{d≥1} (c_d − ĉ_d)²)`` in dB, averaged
over frames, c0 (log gain) excluded. They differ in the cepstra:

* ``mcd``: frequency-warped mel-cepstra from mel-cepstral analysis (Fukada et al. 1992;
  Tokuda et al. 1994), the quantity SPTK's ``mcep`` computes, all-pass constant α fitted to the
  mel scale for the sample rate (see :mod:`.warped_cepstrum`). This is the usual "MCD" of the
  TTS / vocoder literature.
* ``mcd_mfcc``: librosa MFCCs (orthonormal DCT-II of the dB mel spectrum), rescaled to the
  one-sided natural-log cepstral convention of ``mcd`` (log|X| = Σ_k c_k·cos(…)) so the Kubichek
  constant applies. A different quantity (mel filterbank + DCT, no all-pass warping, no
  spectral-envelope fit); do not compare it with ``mcd`` or with published MCD figures.

Frames whose energy is more than ``silence_db`` below the reference's loudest frame are
excluded. ``alignment = "none"`` compares frame i with frame i (vocoder outputs are time-aligned
with their mel input); ``"dtw"`` aligns the non-silent frames of both signals with dynamic time
warping (librosa.sequence.dtw, Euclidean cepstral cost) and averages along the path; it accepts an
estimate of any length and always uses the whole reference (an estimate shorter than the
reference no longer cuts it: same value as the "pad" length policy).

Periodogram floor of ``mcd`` (option ``floor``): ``"absolute"`` (default) adds SPTK's fixed 1e-10
to every bin, so values match SPTK's ``mcep -e 1e-10``; but where an output has no energy (a
band-limited vocoder) the floor is what gets compared, and it sits relatively higher when the
pair is quieter, so MCD falls with level (29.2 / 21.8 / 14.8 dB at 0 / −20 / −40 dB peak on the
band-limited pair of tests/test_metrics_mcd.py). ``"relative"`` multiplies the floor by the
reference's squared peak: values no longer depend on the common level of the pair and equal
the absolute ones for a reference peaking at full scale.
"""
from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..errors import MetricUnavailable
from ..params import Choice, Integer, Param, Real, Table
from .base import INF, Column, Metric
from .dsp import (ENERGY_FLOOR, frame_energy_db, frame_signal, mel_filterbank, ms_to_samples,
                  nearest_pow2)
from .warped_cepstrum import MelCepstralAnalyzer, mcd_from_cepstra, mel_alpha

# Newton solve settings of the mel-cepstral analysis and the periodogram floor (our choices):
# the floor is far below any audible content of a [-1, 1] signal; stopping at a Newton decrement
# of 1e-3 keeps per-frame cepstra within ~0.03 dB (MCD means within ~1e-3 dB) of SPTK's mcep on
# the test signals, at about 2/3 of the cost of a tight solve.
PERIODOGRAM_FLOOR = 1e-10
NEWTON_TOL = 1e-3
NEWTON_MAX_ITER = 30
DB_TO_NEPER_AMPLITUDE = math.log(10.0) / 20.0     # ln|X| = dB · ln(10)/20
MFCC_POWER_FLOOR = 1e-10                           # librosa.power_to_db amin (its default)

_COMMON_OPTIONS = (
    Param("alignment", Choice(("none", "dtw")), "none",
          "frame alignment: 'none' (equal length) or 'dtw'"),
    Param("silence_db", Real(high=0.0), -40.0, "drop frames this many dB below the reference's "
          "loudest frame (null = keep all)", nullable=True),
    Param("frame_ms", Real(2.0, 200.0), 25.0,
          "analysis frame (ms); rounded to the nearest power of two in samples"),
    Param("hop_ms", Real(0.5, 100.0), 10.0, "frame shift (ms)"),
)


class _CepstralDistance(Metric):
    """Shared framing, silence removal, alignment and averaging."""

    window: str = "blackman"
    periodic_window: bool = False      # symmetric Blackman, as SPTK's `window` command

    def __init__(self, options=None, *, source=None):
        super().__init__(options, source=source)
        # DTW aligns the two frame sequences itself: an estimate of any length is scored against
        # the whole reference (Metric.score then never cuts the reference to the estimate).
        self.any_length = self.options["alignment"] == "dtw"

    def _frames(self, sr: int) -> tuple[int, int]:
        return (nearest_pow2(self.options["frame_ms"] * sr / 1000.0),
                ms_to_samples(self.options["hop_ms"], sr))

    def _features(self, frames: np.ndarray, sr: int, level: float = 1.0) -> np.ndarray:
        """(F, L) raw frames -> (F, D) cepstra without c0; ``level``: see :meth:`_level`."""
        raise NotImplementedError

    def _level(self, reference: np.ndarray) -> float:
        """Power scale of the analysis floor for this utterance (1.0: absolute floor)."""
        return 1.0

    def _windowed(self, frames: np.ndarray) -> np.ndarray:
        from scipy.signal import get_window

        win = get_window(self.window, frames.shape[1], fftbins=self.periodic_window)
        return np.asarray(frames, dtype=np.float64) * win

    def _prepare(self, reference: np.ndarray, sr: int) -> dict[str, Any]:
        length, hop = self._frames(sr)
        frames = frame_signal(np.asarray(reference, dtype=np.float64), length, hop)
        energy = frame_energy_db(frames)
        top = float(energy.max())
        if top <= 10.0 * math.log10(ENERGY_FLOOR) + 1.0:
            raise MetricUnavailable("reference is digitally silent")
        sil = self.options["silence_db"]
        threshold = -INF if sil is None else top + sil
        keep = energy >= threshold
        level = self._level(reference)
        return {"keep": keep, "threshold_db": threshold, "level": level,
                "cep": self._features(frames[keep], sr, level)}

    def _score(self, data: dict[str, Any], estimate: np.ndarray, sr: int) -> dict[str, float]:
        length, hop = self._frames(sr)
        frames = frame_signal(np.asarray(estimate, dtype=np.float64), length, hop)
        ref = data["cep"]
        prefix = self.name
        if self.options["alignment"] == "none":
            per_frame = mcd_from_cepstra(ref, self._features(frames[data["keep"]], sr,
                                                             data["level"]))
            return {prefix: float(per_frame.mean()), f"{prefix}_frames": float(per_frame.size)}
        keep = frame_energy_db(frames) >= data["threshold_db"]
        if not keep.any():
            raise MetricUnavailable("estimate is silent: no frame above the silence threshold")
        est = self._features(frames[keep], sr, data["level"])
        from scipy.spatial.distance import cdist
        import librosa

        cost = cdist(ref, est, metric="euclidean")
        _, path = librosa.sequence.dtw(C=cost, backtrack=True)
        per_pair = mcd_from_cepstra(ref[path[:, 0]], est[path[:, 1]])
        return {prefix: float(per_pair.mean()), f"{prefix}_frames": float(len(path))}

    def _frames_column(self) -> Column:
        return Column(f"{self.name}_frames", "frames", None, (0.0, INF),
                      "frames averaged: non-silent reference frames, or the DTW path length")

    def _variant(self, sample_rate: int | None) -> dict[str, Any]:
        out: dict[str, Any] = {"distance": "Kubichek 1993, (10/ln10)*sqrt(2*sum_d>=1 dc_d^2), "
                               "mean over frames", "window": self.window,
                               "periodic_window": self.periodic_window,
                               "framing": "frames from sample 0, no padding",
                               "silence_reference": "reference's loudest frame energy"}
        if sample_rate:
            length, hop = self._frames(sample_rate)
            out.update(frame_length=length, hop_length=hop)
        return out


class MelCepstralDistortion(_CepstralDistance):
    """Mel-cepstral distortion on frequency-warped mel-cepstra (Kubichek 1993; Tokuda et al. 1994).

    Analysis: Blackman-windowed frames, periodogram + ``PERIODOGRAM_FLOOR``, mel-cepstrum of order
    ``order`` by Newton's method on the unbiased log-spectral criterion (same optimum as SPTK
    ``mcep``), α = ``alpha`` or the mel-scale fit for the sample rate.
    """

    name = "mcd"
    description = "mel-cepstral distortion, warped mel-cepstra (SPTK-style), dB"
    options_spec = Table("", [
        Param("order", Integer(1, 60), 24, "mel-cepstral order M (c1..cM compared)"),
        Param("alpha", Real(0.0, 0.99), None,
              "all-pass constant; unset: mel-scale fit for the rate"),
        Param("floor", Choice(("absolute", "relative")), "absolute",
              "periodogram floor: 'absolute' (SPTK's fixed 1e-10) or 'relative' (1e-10 x the "
              "reference's squared peak: level-independent)"),
        *_COMMON_OPTIONS,
    ], entry="option")

    def __init__(self, options=None, *, source=None):
        super().__init__(options, source=source)
        self._analyzers: dict[int, MelCepstralAnalyzer] = {}
        if self.options["alignment"] == "dtw":
            self.libraries = ("librosa",)      # version recorded by Metric.variant()

    @property
    def columns(self) -> tuple[Column, ...]:
        return (Column("mcd", "dB", False, (0.0, INF),
                       "mel-cepstral distortion (warped mel-cepstra, c0 excluded)"),
                self._frames_column())

    def alpha_for(self, sr: int) -> float:
        return self.options["alpha"] if self.options["alpha"] is not None else mel_alpha(sr)

    def _analyzer(self, sr: int) -> MelCepstralAnalyzer:
        if sr not in self._analyzers:
            length, _ = self._frames(sr)
            self._analyzers[sr] = MelCepstralAnalyzer(
                length, self.options["order"], self.alpha_for(sr), floor=PERIODOGRAM_FLOOR,
                tol=NEWTON_TOL, max_iter=NEWTON_MAX_ITER)
        return self._analyzers[sr]

    def _level(self, reference: np.ndarray) -> float:
        if self.options["floor"] == "absolute":
            return 1.0
        return float(np.max(np.abs(reference))) ** 2

    def _features(self, frames: np.ndarray, sr: int, level: float = 1.0) -> np.ndarray:
        if frames.shape[0] == 0:
            return np.zeros((0, self.options["order"]))
        return self._analyzer(sr).analyze(self._windowed(frames),
                                          floor=PERIODOGRAM_FLOOR * level)[:, 1:]

    def _variant(self, sample_rate: int | None) -> dict[str, Any]:
        out = super()._variant(sample_rate)
        out.update(cepstrum="mel-cepstral analysis, gamma=0 (Tokuda et al. 1994), Newton solve",
                   periodogram_floor=PERIODOGRAM_FLOOR,
                   periodogram_floor_rule={"absolute": "added as is (SPTK mcep -e)",
                                           "relative": "times the reference's squared peak"}
                   [self.options["floor"]], newton_tol=NEWTON_TOL,
                   newton_max_iter=NEWTON_MAX_ITER,
                   alpha_rule="fixed" if self.options["alpha"] is not None else
                   "least-squares fit to the mel scale on a 0.001 grid (as SPTK's alpha helper)")
        if sample_rate:
            out["alpha"] = self.alpha_for(sample_rate)
        if self.options["alignment"] == "dtw":
            out["dtw"] = "librosa.sequence.dtw"
        return out


class MfccDistortion(_CepstralDistance):
    """Kubichek-style distance on librosa MFCCs — NOT the warped mel-cepstral MCD.

    MFCC = DCT-II (orthonormal) of 10·log10 mel power (librosa.feature.mfcc on a Slaney mel
    filterbank), multiplied by ln(10)/20 (dB -> natural-log amplitude) and by √(2/n_mels)
    (orthonormal DCT -> one-sided cepstral coefficients, c_k = (2/N)·Σ_n x_n cos(πk(2n+1)/2N));
    c0 excluded.
    """

    name = "mcd_mfcc"
    description = "MFCC-based cepstral distance (librosa MFCC), dB; not comparable with mcd"
    window = "hann"
    periodic_window = True             # as librosa's STFT
    libraries = ("librosa",)
    options_spec = Table("", [
        Param("n_mfcc", Integer(2, 128), 13, "MFCCs computed (c1..c_{n-1} compared)"),
        Param("n_mels", Integer(8, 256), 40, "mel bands"),
        *_COMMON_OPTIONS,
    ], entry="option", rules=[("n_mfcc", "<=", "n_mels")])

    @property
    def columns(self) -> tuple[Column, ...]:
        return (Column("mcd_mfcc", "dB", False, (0.0, INF),
                       "MFCC-based cepstral distance (different quantity from mcd)"),
                self._frames_column())

    def _features(self, frames: np.ndarray, sr: int, level: float = 1.0) -> np.ndarray:
        n_mfcc = self.options["n_mfcc"]
        if frames.shape[0] == 0:
            return np.zeros((0, n_mfcc - 1))
        import librosa

        spec = np.fft.rfft(self._windowed(frames), axis=-1)
        power = spec.real ** 2 + spec.imag ** 2
        fb = mel_filterbank(sr, frames.shape[1], self.options["n_mels"])
        mel_db = librosa.power_to_db((power @ fb.T).T, ref=1.0, amin=MFCC_POWER_FLOOR,
                                     top_db=None)
        mfcc = librosa.feature.mfcc(S=mel_db, n_mfcc=n_mfcc, dct_type=2, norm="ortho")
        scale = DB_TO_NEPER_AMPLITUDE * math.sqrt(2.0 / self.options["n_mels"])
        return mfcc.T[:, 1:] * scale

    def _variant(self, sample_rate: int | None) -> dict[str, Any]:
        out = super()._variant(sample_rate)
        out.update(cepstrum="librosa MFCC: DCT-II ortho of power_to_db(Slaney mel power), "
                   "amin 1e-10, no top_db, scaled by ln(10)/20 * sqrt(2/n_mels)")
        return out
