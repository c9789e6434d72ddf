"""Feature front-end: the log-mel spectrogram a vocoder is conditioned on.

Every parameter is explicit, because a front-end that differs from the one the vocoder was trained
with is the most common silent error in vocoder evaluation (common practice, no source). The whole
parameter set is recorded in each run's manifest.
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
from dataclasses import dataclass
from types import SimpleNamespace
from typing import Any, Mapping

import numpy as np

from .errors import InputError
from .params import is_integer, is_number

LOG_FUNCS = {"ln": np.log, "log10": np.log10, "log2": np.log2}
MEL_SCALES = ("slaney", "htk")


@dataclass(frozen=True)
class MelFrontEnd:
    """Log-mel spectrogram computed with librosa.

    ``power`` is 1.0 for a magnitude spectrogram and 2.0 for a power spectrogram. ``mel_norm`` is
    librosa's filter normalisation ("slaney" area normalisation or None). ``floor`` is added
    (``clamp``) or used as a lower bound before the log, chosen by ``floor_mode``.
    ``normalize`` optionally maps log-mel to zero-mean/unit-range with fixed ``(mean, std)``.
    """

    sample_rate: int = 22050
    n_fft: int = 1024
    win_length: int = 1024
    hop_length: int = 256
    n_mels: int = 80
    fmin: float = 0.0
    fmax: float | None = 8000.0
    mel_scale: str = "slaney"
    mel_norm: str | None = "slaney"
    power: float = 1.0
    log: str = "ln"
    floor: float = 1e-5
    floor_mode: str = "clamp"
    center: bool = True
    normalize: tuple[float, float] | None = None

    def __post_init__(self) -> None:
        self.validate()

    # -- validation -----------------------------------------------------------------------
    def validate(self, source: str = "front-end") -> None:
        def bad(field: str, msg: str) -> InputError:
            return InputError(msg, source=source, field=field, value=getattr(self, field))

        for name in ("sample_rate", "n_fft", "win_length", "hop_length", "n_mels"):
            v = getattr(self, name)
            if not is_integer(v) or v <= 0:
                raise bad(name, "must be a positive integer")
        for name in ("fmin", "fmax", "floor"):
            v = getattr(self, name)
            if not (v is None and name == "fmax") and not is_number(v):
                raise bad(name, "must be a number")
        if self.win_length > self.n_fft:
            raise bad("win_length", f"must not exceed n_fft={self.n_fft}")
        nyq = self.sample_rate / 2
        if not (0 <= self.fmin < nyq):
            raise bad("fmin", f"must be in [0, {nyq:g}) Hz")
        if self.fmax is not None and not (self.fmin < self.fmax <= nyq):
            raise bad("fmax", f"must be in ({self.fmin:g}, {nyq:g}] Hz or None")
        if self.mel_scale not in MEL_SCALES:
            raise bad("mel_scale", f"must be one of {MEL_SCALES}")
        if self.mel_norm not in (None, "slaney"):
            raise bad("mel_norm", "must be 'slaney' or None")
        if self.power not in (1.0, 2.0):
            raise bad("power", "must be 1.0 (magnitude) or 2.0 (power)")
        if self.log not in LOG_FUNCS:
            raise bad("log", f"must be one of {sorted(LOG_FUNCS)}")
        if not (np.isfinite(self.floor) and self.floor > 0):
            raise bad("floor", "must be a positive finite number")
        if self.floor_mode not in ("clamp", "add"):
            raise bad("floor_mode", "must be 'clamp' (max(x, floor)) or 'add' (x + floor)")
        if self.normalize is not None and (len(self.normalize) != 2 or not all(
                np.isfinite(self.normalize)) or self.normalize[1] <= 0):
            raise bad("normalize", "must be (mean, std) with a finite mean and std > 0")

    # -- description ----------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        d = dataclasses.asdict(self)
        d["normalize"] = list(self.normalize) if self.normalize is not None else None
        return d

    @classmethod
    def from_dict(cls, d: Mapping[str, Any], source: str = "front-end") -> "MelFrontEnd":
        names = {f.name for f in dataclasses.fields(cls)}
        unknown = sorted(set(d) - names)
        if unknown:
            raise InputError(f"unknown front-end parameter(s) {unknown}; valid: {sorted(names)}",
                             source=source, field=unknown[0])
        kw = dict(d)
        if kw.get("normalize") is not None:
            try:
                kw["normalize"] = tuple(float(x) for x in kw["normalize"])
            except (TypeError, ValueError):
                raise InputError("must be (mean, std) numbers", source=source, field="normalize",
                                 value=kw["normalize"]) from None
        merged = {f.name: f.default for f in dataclasses.fields(cls)} | kw
        try:
            # validate under the caller's source first, so the error keeps its field and value
            cls.validate(SimpleNamespace(**merged), source)  # type: ignore[arg-type]
            return cls(**kw)
        except TypeError as e:
            raise InputError(str(e), source=source) from None

    @classmethod
    def coerce(cls, fe: Any, source: str = "front-end", field: str = "frontend",
               default: "MelFrontEnd | None" = None) -> "MelFrontEnd":
        """A declared front-end: an instance, a dict of its fields, or ``default`` when None."""
        if fe is None and default is not None:
            return default
        if isinstance(fe, MelFrontEnd):
            return fe
        if isinstance(fe, Mapping):
            return cls.from_dict(fe, source=source)
        raise InputError("frontend must be a MelFrontEnd or a dict of its fields", source=source,
                         field=field, value=type(fe).__name__)

    def fingerprint(self) -> str:
        blob = json.dumps(self.to_dict(), sort_keys=True).encode()
        return hashlib.sha256(blob).hexdigest()[:16]

    def differences(self, other: "MelFrontEnd") -> dict[str, tuple[Any, Any]]:
        a, b = self.to_dict(), other.to_dict()
        return {k: (a[k], b[k]) for k in a if a[k] != b[k]}

    # -- computation ----------------------------------------------------------------------
    def mel_basis(self) -> np.ndarray:
        """``(n_mels, 1 + n_fft // 2)`` float32, equal to ``librosa.filters.mel`` (see
        :mod:`vocobench.metrics.melbank`: no librosa import, so no numba compilation)."""
        from .metrics.melbank import mel

        return mel(self.sample_rate, self.n_fft, self.n_mels, self.fmin, self.fmax,
                   htk=self.mel_scale == "htk", norm=self.mel_norm)

    def n_frames(self, n_samples: int) -> int:
        if self.center:
            return 1 + n_samples // self.hop_length
        return 1 + max(0, n_samples - self.n_fft) // self.hop_length

    def expected_samples(self, n_frames: int) -> int:
        """Waveform length a vocoder is expected to return for ``n_frames`` frames."""
        return n_frames * self.hop_length

    def __call__(self, audio: np.ndarray) -> np.ndarray:
        """Log-mel features, shape ``(n_mels, frames)``, float32."""
        from .metrics.melbank import stft_magnitude

        y = np.asarray(audio, dtype=np.float32)
        if y.ndim != 1:
            raise InputError("audio for the front-end must be 1-D", field="audio", value=y.shape)
        if y.size > self.n_fft:
            spec = stft_magnitude(y, self.n_fft, self.hop_length, self.win_length, self.center)
        else:                    # shorter than one frame: librosa's own padding rules and warnings
            import librosa

            spec = np.abs(librosa.stft(y, n_fft=self.n_fft, hop_length=self.hop_length,
                                       win_length=self.win_length, window="hann",
                                       center=self.center, pad_mode="reflect"))
        spec = spec ** self.power
        mel = self.mel_basis() @ spec
        mel = np.maximum(mel, self.floor) if self.floor_mode == "clamp" else mel + self.floor
        logmel = LOG_FUNCS[self.log](mel)
        if self.normalize is not None:
            mean, std = self.normalize
            logmel = (logmel - mean) / std
        return logmel.astype(np.float32)

    def to_linear_mel(self, features: np.ndarray) -> np.ndarray:
        """Undo log (and normalisation): mel energies in the front-end's power/magnitude units."""
        x = np.asarray(features, dtype=np.float64)
        if self.normalize is not None:
            mean, std = self.normalize
            x = x * std + mean
        base = {"ln": np.e, "log10": 10.0, "log2": 2.0}[self.log]
        mel = np.power(base, x)
        if self.floor_mode == "add":
            mel = np.maximum(mel - self.floor, 0.0)
        return mel
