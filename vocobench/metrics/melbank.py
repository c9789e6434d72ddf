"""Mel filter bank and STFT magnitude in plain numpy, computed exactly as librosa 0.10–0.11 computes
them (``librosa.filters.mel``, ``librosa.stft``), so features and scores do not change.

Why not librosa itself: importing librosa compiles its numba helpers (vectorised ufuncs with
explicit signatures are compiled at import), about 25 CPU-seconds on the first run after install
and once more in every worker process started before the cache is written. The default pipeline
needs only these two pure-numpy routines. ``tests/test_frontend.py`` checks them bit for bit
against librosa.

Mel scales: Slaney's (linear below 1 kHz, logarithmic above; Slaney 1998, "Auditory Toolbox",
Interval Research Technical Report #1998-010) and HTK's ``2595·log10(1 + f/700)`` (Young et al.,
"The HTK Book"); ``"slaney"`` normalisation scales each triangle to unit area (2 / bandwidth).
"""
from __future__ import annotations

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

# Slaney's mel scale (constants as in librosa.core.convert, from the Auditory Toolbox):
SLANEY_F_SP = 200.0 / 3         # Hz per mel below the break
SLANEY_MIN_LOG_HZ = 1000.0      # start of the logarithmic region
SLANEY_LOGSTEP = np.log(6.4) / 27.0
HTK_FACTOR, HTK_BREAK = 2595.0, 700.0


def hz_to_mel(f: np.ndarray, htk: bool = False) -> np.ndarray:
    f = np.asanyarray(f, dtype=np.float64)
    if htk:
        return HTK_FACTOR * np.log10(1.0 + f / HTK_BREAK)
    mels = (f - 0.0) / SLANEY_F_SP
    min_log_mel = (SLANEY_MIN_LOG_HZ - 0.0) / SLANEY_F_SP
    if f.ndim:
        log_t = f >= SLANEY_MIN_LOG_HZ
        mels[log_t] = min_log_mel + np.log(f[log_t] / SLANEY_MIN_LOG_HZ) / SLANEY_LOGSTEP
    elif f >= SLANEY_MIN_LOG_HZ:
        mels = min_log_mel + np.log(f / SLANEY_MIN_LOG_HZ) / SLANEY_LOGSTEP
    return mels


def mel_to_hz(mels: np.ndarray, htk: bool = False) -> np.ndarray:
    mels = np.asanyarray(mels, dtype=np.float64)
    if htk:
        return HTK_BREAK * (10.0 ** (mels / HTK_FACTOR) - 1.0)
    freqs = 0.0 + SLANEY_F_SP * mels
    min_log_mel = (SLANEY_MIN_LOG_HZ - 0.0) / SLANEY_F_SP
    log_t = mels >= min_log_mel
    freqs[log_t] = SLANEY_MIN_LOG_HZ * np.exp(SLANEY_LOGSTEP * (mels[log_t] - min_log_mel))
    return freqs


def mel(sr: float, n_fft: int, n_mels: int = 128, fmin: float = 0.0, fmax: float | None = None,
        htk: bool = False, norm: str | None = "slaney") -> np.ndarray:
    """Triangular mel filter bank ``(n_mels, 1 + n_fft // 2)``, float32 (``norm``: "slaney" or None)."""
    if norm not in ("slaney", None):
        raise ValueError(f"unsupported mel norm {norm!r}")
    fmax = float(sr) / 2 if fmax is None else fmax
    weights = np.zeros((int(n_mels), int(1 + n_fft // 2)), dtype=np.float32)
    fftfreqs = np.fft.rfftfreq(n=n_fft, d=1.0 / sr)
    mel_f = mel_to_hz(np.linspace(hz_to_mel(fmin, htk), hz_to_mel(fmax, htk), n_mels + 2), htk)
    fdiff = np.diff(mel_f)
    ramps = np.subtract.outer(mel_f, fftfreqs)
    for i in range(n_mels):
        lower = -ramps[i] / fdiff[i]
        upper = ramps[i + 2] / fdiff[i + 1]
        weights[i] = np.maximum(0, np.minimum(lower, upper))
    if norm == "slaney":
        enorm = 2.0 / (mel_f[2: n_mels + 2] - mel_f[:n_mels])
        weights *= enorm[:, np.newaxis]
    return weights


def hann_window(win_length: int, n_fft: int) -> np.ndarray:
    """Periodic Hann window (``scipy.signal.get_window("hann", N, fftbins=True)``) zero-padded to
    ``n_fft`` in the centre, float64."""
    from scipy.signal import get_window

    w = get_window("hann", win_length, fftbins=True)
    lpad = (n_fft - win_length) // 2
    return np.pad(w, (lpad, n_fft - win_length - lpad))


def stft_magnitude(y: np.ndarray, n_fft: int, hop_length: int, win_length: int,
                   center: bool = True) -> np.ndarray:
    """``|STFT|`` ``(1 + n_fft // 2, frames)``, float32, of float32 ``y``: Hann window, frames centred
    with reflect padding when ``center``; the windowed frames are transformed in float64 and the
    spectrum stored as complex64, as librosa does."""
    y = np.asarray(y, dtype=np.float32)
    if center:
        y = np.pad(y, n_fft // 2, mode="reflect")
    frames = sliding_window_view(y, n_fft)[::hop_length]
    spec = np.fft.rfft(hann_window(win_length, n_fft) * frames, axis=-1).astype(np.complex64)
    return np.abs(spec).T
