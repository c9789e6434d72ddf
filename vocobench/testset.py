"""Test set: a folder of wav/flac files or a CSV manifest → validated, fingerprinted utterances.

CSV manifest columns: ``id``, ``path`` (relative to the CSV's folder; must stay inside it), optional
``features`` (a ``.npy`` log-mel array, ``(n_mels, frames)``, used instead of the front-end), and
any other column as a tag (speaker, style, …). Audio is loaded per job (streaming), resampled to
the vocoder's rate with the soxr "VHQ" resampler and mixed down to mono with a warning.
"""
from __future__ import annotations

import csv
import io
import hashlib
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .errors import InputError

AUDIO_EXTENSIONS = (".wav", ".flac")
MIN_DURATION_S = 0.25          # shorter references leave too few frames for STOI/PESQ (common practice)
MIN_RATE, MAX_RATE = 8000, 192000
SILENCE_PEAK = 1e-4            # −80 dBFS: a reference this quiet is treated as silent
RESAMPLER = "soxr VHQ"


@dataclass(frozen=True)
class Utterance:
    id: str
    path: Path
    sha256: str
    duration_s: float
    native_rate: int
    channels: int
    tags: dict[str, str] = field(default_factory=dict)
    features_path: Path | None = None

    def describe(self) -> dict[str, Any]:
        return {"id": self.id, "sha256": self.sha256, "duration_s": round(self.duration_s, 6),
                "native_rate": self.native_rate, "channels": self.channels, "tags": self.tags,
                "path": str(self.path), "features": str(self.features_path) if self.features_path else None}


@dataclass
class TestSet:
    source: Path
    utterances: list[Utterance]

    @property
    def fingerprint(self) -> str:
        """Hash over (id, content hash) pairs: same files under same ids ⇔ same fingerprint."""
        h = hashlib.sha256()
        for u in sorted(self.utterances, key=lambda u: u.id):
            h.update(f"{u.id}\0{u.sha256}\n".encode())
        return h.hexdigest()[:16]

    def describe(self) -> dict[str, Any]:
        return {"source": str(self.source), "fingerprint": self.fingerprint,
                "n_utterances": len(self.utterances), "resampler": RESAMPLER,
                "utterances": [u.describe() for u in self.utterances]}


def load_testset(path: str | Path, source: str = "testset.path") -> TestSet:
    """Scan and validate a test set (every file is read once to check and hash it)."""
    path = Path(path)
    if path.is_dir():
        files = sorted(p for p in path.iterdir() if p.suffix.lower() in AUDIO_EXTENSIONS)
        if not files:
            raise InputError(f"no {'/'.join(AUDIO_EXTENSIONS)} files in the folder",
                             source=str(path), field=source)
        entries = [(f.stem, f, {}, None) for f in files]
        root = path
    elif path.is_file() and path.suffix.lower() == ".csv":
        entries, root = _read_manifest(path), path.parent
    elif path.exists():
        raise InputError("test set must be a folder or a .csv manifest", source=str(path), field=source)
    else:
        raise InputError("test set not found", source=str(path), field=source)
    seen: set[str] = set()
    utts = []
    for uid, fpath, tags, feats in entries:
        if uid in seen:
            raise InputError("duplicate utterance id", source=str(path), field="id", value=uid)
        seen.add(uid)
        utts.append(_inspect(uid, fpath, tags, feats))
    return TestSet(root.resolve(), utts)


def _read_manifest(path: Path) -> list[tuple[str, Path, dict[str, str], Path | None]]:
    root = path.parent.resolve()
    try:
        with open(path, newline="", encoding="utf-8") as f:
            rows = list(csv.DictReader(f))
    except (UnicodeDecodeError, csv.Error) as e:
        raise InputError(f"unreadable CSV: {e}", source=str(path)) from None
    if not rows:
        raise InputError("manifest has no rows", source=str(path))
    for col in ("id", "path"):
        if col not in rows[0]:
            raise InputError("manifest lacks a required column", source=str(path), field=col)
    out = []
    for i, r in enumerate(rows, start=2):
        uid = (r.get("id") or "").strip()
        if not uid:
            raise InputError("empty id", source=f"{path}:{i}", field="id")
        fpath = _inside(root, r.get("path") or "", path, i, "path")
        feats = _inside(root, r["features"], path, i, "features") if r.get("features") else None
        tags = {k: v for k, v in r.items() if k not in ("id", "path", "features") and k}
        out.append((uid, fpath, tags, feats))
    return out


def _inside(root: Path, rel: str, manifest: Path, line: int, field_name: str) -> Path:
    p = (root / rel).resolve()
    if not rel or not p.is_relative_to(root):
        raise InputError("path escapes the test-set folder", source=f"{manifest}:{line}",
                         field=field_name, value=rel)
    return p


def _inspect(uid: str, path: Path, tags: dict[str, str], feats: Path | None) -> Utterance:
    import soundfile as sf

    if not path.is_file():
        raise InputError("audio file not found", source=str(path), field="path")
    data = path.read_bytes()
    try:
        y, rate = sf.read(io.BytesIO(data), dtype="float64", always_2d=True)
    except Exception as e:
        raise InputError(f"unreadable or corrupt audio: {str(e).strip() or type(e).__name__}",
                         source=str(path)) from None
    if not (MIN_RATE <= rate <= MAX_RATE):
        raise InputError(f"sample rate outside [{MIN_RATE}, {MAX_RATE}] Hz", source=str(path),
                         field="sample_rate", value=rate)
    if y.shape[0] == 0:
        raise InputError("empty audio file", source=str(path), field="frames", value=0)
    if not np.all(np.isfinite(y)):
        raise InputError("audio contains NaN or infinite samples", source=str(path), field="samples")
    dur = y.shape[0] / rate
    if dur < MIN_DURATION_S:
        raise InputError(f"too short: at least {MIN_DURATION_S} s is needed", source=str(path),
                         field="duration_s", value=round(dur, 4))
    if np.max(np.abs(y)) < SILENCE_PEAK:
        raise InputError("reference is silent (peak below −80 dBFS)", source=str(path),
                         field="samples")
    if y.shape[1] > 1:
        warnings.warn(f"{path}: {y.shape[1]} channels are mixed down to mono", stacklevel=3)
    if feats is not None and not feats.is_file():
        raise InputError("features file not found", source=str(feats), field="features")
    return Utterance(uid, path.resolve(), hashlib.sha256(data).hexdigest(), dur, int(rate),
                     int(y.shape[1]), tags, feats)


def load_audio(utt: Utterance, sample_rate: int) -> np.ndarray:
    """Mono float32 audio at ``sample_rate`` (soxr VHQ resampling)."""
    import soundfile as sf

    y, rate = sf.read(str(utt.path), dtype="float32", always_2d=True)
    y = y.mean(axis=1)
    if rate != sample_rate:
        import soxr

        y = soxr.resample(y, rate, sample_rate, quality="VHQ").astype(np.float32)
    return np.ascontiguousarray(y, dtype=np.float32)


def load_features(utt: Utterance) -> np.ndarray | None:
    if utt.features_path is None:
        return None
    try:
        f = np.load(utt.features_path, allow_pickle=False)
    except Exception as e:
        raise InputError(f"unreadable features: {e}", source=str(utt.features_path)) from None
    if f.ndim != 2 or not np.all(np.isfinite(f)):
        raise InputError("features must be a finite (n_mels, frames) array",
                         source=str(utt.features_path), field="features", value=f.shape)
    return f.astype(np.float32)
