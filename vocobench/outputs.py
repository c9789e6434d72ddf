"""Vocoder outputs: validation into a 1-D float waveform, content hash, saving."""
from __future__ import annotations

import hashlib
import io
from pathlib import Path
from typing import Any

import numpy as np

from .arrays import to_numpy
from .errors import ItemFailure


def waveform_problems(y: np.ndarray) -> dict[str, str]:
    """What makes ``y`` unusable as a waveform, keyed ``shape``, ``dtype``, ``empty``, ``finite``
    (checked in that order; a wrong shape stops the others)."""
    if y.ndim != 1:
        return {"shape": f"output has shape {y.shape}; a 1-D waveform is required"}
    out = {}
    if not np.issubdtype(y.dtype, np.floating):
        out["dtype"] = f"output dtype is {y.dtype}; a floating-point waveform is required"
    if y.size == 0:
        out["empty"] = "output is empty"
    elif "dtype" not in out:
        bad = int(np.sum(~np.isfinite(y)))
        if bad:
            out["finite"] = f"output has {bad} non-finite samples (NaN/Inf)"
    return out


def as_waveform(out: Any) -> np.ndarray:
    """Check a vocoder's return value; raise :class:`ItemFailure` with the reason if unusable."""
    try:
        y = to_numpy(out)
    except Exception as e:
        raise ItemFailure(f"output is not array-like ({type(out).__name__}: {e})") from None
    problems = waveform_problems(y)
    if problems:
        raise ItemFailure(next(iter(problems.values())))
    return y.astype(np.float32, copy=False)


def audio_sha(y: np.ndarray) -> str:
    """SHA-256 (first 16 hex digits) of the float32 little-endian samples."""
    return hashlib.sha256(memoryview(np.ascontiguousarray(y, dtype="<f4"))).hexdigest()[:16]


def save_audio(path: Path, y: np.ndarray, sample_rate: int) -> None:
    """24-bit FLAC; samples beyond ±1 are clipped in the saved copy only (scores use the original).

    Encoded in memory and written with one call (libsndfile writing a file directly makes many
    small writes and seeks; the bytes are the same)."""
    import soundfile as sf

    buf = io.BytesIO()
    sf.write(buf, np.clip(y, -1.0, 1.0), sample_rate, format="FLAC", subtype="PCM_24")
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".part")
    tmp.write_bytes(buf.getbuffer())
    tmp.replace(path)
