"""F0 trackers and a per-frame periodicity measure on one shared frame grid.

Every function returns one value per frame, frame ``i`` centred on sample ``i·hop`` (the
``center=True`` convention of librosa; ``1 + len(x) // hop`` frames), so tracks of different
trackers and of the periodicity measure line up frame by frame.

Trackers, each returning ``(f0 in Hz clamped to [fmin, fmax], voiced flag)``:

* :func:`track_pyin` — probabilistic YIN with HMM smoothing (Mauch & Dixon 2014, "pYIN: a
  fundamental frequency estimator using probabilistic threshold distributions", ICASSP),
  ``librosa.pyin`` with its published defaults; voiced = the decoded voiced state, in a frame
  within ``silence_db`` of the loudest frame (the HMM otherwise carries voicing into trailing
  near-silence: measured on tests/data/speech_female.wav, 85 frames Praat calls unvoiced).
* :func:`track_praat` — Praat's autocorrelation tracker (Boersma 1993, "Accurate short-term
  analysis of the fundamental frequency and the harmonics-to-noise ratio of a sampled sound",
  IFA Proceedings 17), through ``praat-parselmouth`` with Praat's standard settings; its frames
  are mapped onto the shared grid by log-linear interpolation between neighbouring Praat frames
  (a grid frame is voiced when both neighbours are).
* :func:`track_yin` — YIN (de Cheveigné & Kawahara 2002, JASA) with a 5-frame running median
  (Rabiner et al. 1975) instead of an HMM; voiced when the frame is within ``silence_db`` of the
  loudest frame and its normalised autocorrelation at the YIN period reaches
  ``voicing_threshold`` (our rule). Fast, but its voicing decision is cruder than pYIN's.

:func:`periodicity` — per frame, the peak over lags ``[1/fmax, 1/fmin]`` of the normalised
autocorrelation of the Hann-windowed, mean-removed frame divided by the window's own normalised
autocorrelation (Boersma 1993; equation number not checked, from memory), peak refined by parabolic interpolation, clipped to
``[0, 1]``. For a periodic signal in white noise it estimates ``S/(S+N)``, i.e.
``HNR = 10·log10(r/(1−r))`` (Boersma 1993).
"""
from __future__ import annotations

import math

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..errors import MetricUnavailable
from .dsp import frame_energy_db, frame_signal

# Absolute-threshold step of de Cheveigné & Kawahara 2002 (the librosa default value).
YIN_TROUGH_THRESHOLD = 0.1
# Median smoothing of the YIN track (Rabiner, Sambur & Schmidt 1975, "Applications of a nonlinear
# smoothing algorithm to speech processing", IEEE TASSP): 5 frames, our choice of length.
YIN_MEDIAN_FRAMES = 5
# Praat "To Pitch (ac)" standard settings: the defaults of parselmouth's to_pitch_ac, which mirror
# the Praat dialog (Praat manual, Sound: To Pitch (ac)...).
PRAAT_AC_SETTINGS = {"max_number_of_candidates": 15, "very_accurate": False,
                     "silence_threshold": 0.03, "voicing_threshold": 0.45, "octave_cost": 0.01,
                     "octave_jump_cost": 0.35, "voiced_unvoiced_cost": 0.14}
# Analysis window of the periodicity measure: three periods of the lowest F0, as Praat's pitch
# analysis uses (Praat manual, "Sound: To Pitch (ac)...": window of 3 periods of the pitch floor).
PERIODICITY_PERIODS = 3.0


def n_frames(n_samples: int, hop: int) -> int:
    return 1 + n_samples // hop


def yin_frame_length(sr: int, fmin: float) -> int:
    """Two periods of ``fmin`` plus two samples: the smallest frame librosa's YIN/pYIN accept
    without warning (its rule: ``sr/fmin < frame_length // 2``)."""
    return 2 * int(math.ceil(sr / fmin)) + 2


def _clamped(f0: np.ndarray, voiced: np.ndarray, fmin: float, fmax: float):
    voiced = voiced & np.isfinite(f0) & (f0 > 0)
    return np.where(voiced, np.clip(np.nan_to_num(f0), fmin, fmax), 0.0), voiced


def centred_frames(x: np.ndarray, frame: int, hop: int) -> np.ndarray:
    """Frames of ``frame`` samples centred on the grid (zero padding), one per grid frame."""
    return frame_signal(np.pad(x, (frame // 2, frame)), frame, hop)[: n_frames(x.size, hop)]


def loud_frames(frames: np.ndarray, silence_db: float) -> np.ndarray:
    """Frames within ``silence_db`` of the loudest one."""
    energy = frame_energy_db(frames)
    return energy >= energy.max() + silence_db


def track_pyin(x: np.ndarray, sr: int, fmin: float, fmax: float, hop: int, *,
               silence_db: float):
    import librosa

    frame = yin_frame_length(sr, fmin)
    x = np.asarray(x, dtype=np.float64)
    f0, voiced, _ = librosa.pyin(x, fmin=fmin, fmax=fmax, sr=sr, frame_length=frame,
                                 hop_length=hop, center=True)
    return _clamped(f0, voiced & loud_frames(centred_frames(x, frame, hop), silence_db), fmin, fmax)


def track_yin(x: np.ndarray, sr: int, fmin: float, fmax: float, hop: int, *,
              voicing_threshold: float, silence_db: float):
    import librosa

    frame = yin_frame_length(sr, fmin)
    x = np.asarray(x, dtype=np.float64)
    f0 = librosa.yin(x, fmin=fmin, fmax=fmax, sr=sr, frame_length=frame, hop_length=hop,
                     center=True, trough_threshold=YIN_TROUGH_THRESHOLD)
    frames = centred_frames(x, frame, hop)
    loud = loud_frames(frames, silence_db)
    lags = np.rint(sr / np.clip(np.nan_to_num(f0, nan=fmin), fmin, fmax)).astype(int)
    voiced = loud & (lag_correlation(frames, lags) >= voicing_threshold) & np.isfinite(f0)
    # Running median over YIN_MEDIAN_FRAMES frames within voiced frames (Rabiner, Sambur &
    # Schmidt 1975): removes isolated octave and sub-octave jumps.
    half = YIN_MEDIAN_FRAMES // 2
    padded = np.pad(np.where(voiced, f0, np.nan), half, constant_values=np.nan)
    windows = sliding_window_view(padded, YIN_MEDIAN_FRAMES)
    f0 = f0.copy()
    f0[voiced] = np.nanmedian(windows[voiced], axis=1)
    return _clamped(f0, voiced, fmin, fmax)


def track_praat(x: np.ndarray, sr: int, fmin: float, fmax: float, hop: int):
    import parselmouth

    x = np.asarray(x, dtype=np.float64)
    try:
        pitch = parselmouth.Sound(x, sampling_frequency=sr).to_pitch_ac(
            time_step=hop / sr, pitch_floor=fmin, pitch_ceiling=fmax, **PRAAT_AC_SETTINGS)
    except parselmouth.PraatError as exc:
        raise MetricUnavailable(f"f0: Praat pitch analysis failed: {str(exc).strip()}") from None
    f = np.nan_to_num(pitch.selected_array["frequency"])
    t = np.asarray(pitch.xs())
    grid = np.arange(n_frames(x.size, hop)) * hop / sr
    if t.size < 2:
        raise MetricUnavailable("f0: signal too short for Praat's pitch analysis")
    j = np.clip(np.searchsorted(t, grid), 1, t.size - 1)
    lo, hi = f[j - 1], f[j]
    w = np.clip((grid - t[j - 1]) / (t[j] - t[j - 1]), 0.0, 1.0)
    voiced = (lo > 0) & (hi > 0)
    with np.errstate(divide="ignore"):
        f0 = np.exp2((1 - w) * np.log2(np.where(voiced, lo, 1.0)) +
                     w * np.log2(np.where(voiced, hi, 1.0)))
    return _clamped(f0, voiced, fmin, fmax)


def periodicity(x: np.ndarray, sr: int, fmin: float, fmax: float, hop: int) -> np.ndarray:
    """Per-frame periodicity in [0, 1] (see module docstring); 0 for silent frames."""
    length = int(math.ceil(PERIODICITY_PERIODS * sr / fmin))
    nfft = 1 << int(math.ceil(math.log2(2 * length)))
    x = np.asarray(x, dtype=np.float64)
    frames = centred_frames(x, length, hop)
    window = np.hanning(length + 2)[1:-1]                  # Hann without the zero end points
    lo, hi = max(1, int(math.floor(sr / fmax))), min(length - 2, int(math.ceil(sr / fmin)))
    r_w = _autocorrelation(window[None, :], nfft)[0, : hi + 2]
    r_w = r_w / r_w[0]
    out = np.zeros(frames.shape[0])
    for start in range(0, frames.shape[0], 256):           # bounded memory for long signals
        block = frames[start: start + 256]
        a = (block - block.mean(axis=1, keepdims=True)) * window
        r_a = _autocorrelation(a, nfft)[:, : hi + 2]
        energy = r_a[:, :1]
        ok = energy[:, 0] > 0
        r = np.divide(r_a, energy, out=np.zeros_like(r_a), where=energy > 0) / r_w
        k = lo + np.argmax(r[:, lo: hi + 1], axis=1)
        rows = np.arange(r.shape[0])
        a_, b_, c_ = r[rows, k - 1], r[rows, k], r[rows, k + 1]
        den = a_ - 2 * b_ + c_
        shift = np.divide(0.5 * (a_ - c_), den, out=np.zeros_like(den), where=den < 0)
        peak = b_ - 0.25 * (a_ - c_) * np.clip(shift, -0.5, 0.5)
        out[start: start + r.shape[0]] = np.where(ok, np.clip(peak, 0.0, 1.0), 0.0)
    return out


def _autocorrelation(frames: np.ndarray, nfft: int) -> np.ndarray:
    spec = np.fft.rfft(frames, n=nfft, axis=-1)
    return np.fft.irfft(spec.real ** 2 + spec.imag ** 2, n=nfft, axis=-1)


def lag_correlation(frames: np.ndarray, lags: np.ndarray) -> np.ndarray:
    """Normalised correlation of frame[n] with frame[n + lag] for a per-frame integer lag."""
    count, length = frames.shape
    lags = np.clip(lags, 1, length - 1)
    n = np.arange(length)
    valid = n[None, :] < (length - lags)[:, None]
    shifted = np.take_along_axis(frames, np.minimum(n[None, :] + lags[:, None], length - 1), 1)
    a = np.where(valid, frames, 0.0)
    b = np.where(valid, shifted, 0.0)
    num = np.einsum("fl,fl->f", a, b)
    den = np.sqrt(np.einsum("fl,fl->f", a, a) * np.einsum("fl,fl->f", b, b))
    return np.divide(num, den, out=np.zeros(count), where=den > 0)
