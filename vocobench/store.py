"""Results store: a self-describing run directory.

Layout (``RUN_DIR/``):

* ``manifest.json`` — config, vocoder, front-end, metric variants and columns, dataset fingerprint,
  grid, seeds, timing settings, hardware and package versions (written atomically);
* ``items.jsonl`` — journal, one JSON object per finished item, appended and fsync'd the moment
  the item finishes, so a crash loses at most the item in flight;
* ``timing.jsonl`` — journal of the timing phase, one object per timed call;
* ``items.csv``, ``timing.csv`` — tables rendered from the journals;
* ``audio/`` — saved outputs (FLAC), ``report/`` — rendered tables, plots and listening page;
* ``.lock`` — held (``flock``) while a run writes the directory.
"""
from __future__ import annotations

import fcntl
import json
import math
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Mapping

import numpy as np

from .errors import InputError

FORMAT = "vocobench-run/1"
MANIFEST, ITEMS, TIMING = "manifest.json", "items.jsonl", "timing.jsonl"
ITEM_ORDER = ("utt_id", "schedule", "sampler", "steps", "nfe", "seed", "status", "failure",
              "duration_s", "synth_s", "rtf", "ms_per_nfe", "length_diff", "audio_sha",
              "audio_path", "utt_sha", "key")


def _default(o: Any) -> Any:
    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON-serialisable: {type(o).__name__}")


def dumps(obj: Any) -> str:
    """JSON with NaN written as null (valid JSON everywhere)."""
    return json.dumps(_nan_to_none(obj), default=_default, sort_keys=True, allow_nan=False)


def _nan_to_none(o: Any) -> Any:
    if isinstance(o, float) and not math.isfinite(o):
        return None if math.isnan(o) else ("inf" if o > 0 else "-inf")
    if isinstance(o, Mapping):
        return {k: _nan_to_none(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [_nan_to_none(v) for v in o]
    if isinstance(o, np.floating):
        return _nan_to_none(float(o))
    return o


def write_atomic(path: Path, text: str | bytes) -> None:
    """Write a file so that readers see the old or the new content, never a half-written one."""
    data = text.encode("utf-8") if isinstance(text, str) else text
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


class Journal:
    """Append-only JSON-lines file; each record is flushed and fsync'd on append."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self._f = None

    def append(self, record: Mapping[str, Any]) -> None:
        if self._f is None:
            self._repair_tail()
            self._f = open(self.path, "a", encoding="utf-8")
        self._f.write(dumps(record) + "\n")
        self._f.flush()
        os.fsync(self._f.fileno())

    def _repair_tail(self) -> None:
        """Drop a torn last line left by a kill mid-write."""
        if not self.path.exists():
            return
        data = self.path.read_bytes()
        if data and not data.endswith(b"\n"):
            keep = data[: data.rfind(b"\n") + 1]
            with open(self.path, "wb") as f:
                f.write(keep)
                f.flush()
                os.fsync(f.fileno())

    def close(self) -> None:
        if self._f is not None:
            self._f.close()
            self._f = None


def read_jsonl(path: Path) -> list[dict[str, Any]]:
    """Records of a journal; a torn final line (crash mid-write) is ignored."""
    path = Path(path)
    if not path.exists():
        return []
    out = []
    lines = path.read_text(encoding="utf-8").split("\n")
    for i, line in enumerate(lines):
        if not line.strip():
            continue
        try:
            out.append(json.loads(line))
        except json.JSONDecodeError:
            if i >= len(lines) - 2:          # last line, possibly torn
                break
            raise InputError("corrupt journal line", source=str(path), field=f"line {i + 1}")
    return out


class RunLock:
    """Exclusive lock on a run directory, so two runs never write one directory."""

    def __init__(self, run_dir: Path) -> None:
        self.path = Path(run_dir) / ".lock"
        self._fd: int | None = None

    def __enter__(self) -> "RunLock":
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(self._fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(self._fd)
            self._fd = None
            raise InputError("another vocobench run is writing this directory",
                             source=str(self.path.parent)) from None
        os.ftruncate(self._fd, 0)
        os.write(self._fd, str(os.getpid()).encode())
        return self

    def __exit__(self, *exc: object) -> None:
        if self._fd is not None:
            fcntl.flock(self._fd, fcntl.LOCK_UN)
            os.close(self._fd)
            self._fd = None


@dataclass
class Run:
    """A stored run, loaded for statistics and rendering (no re-synthesis)."""

    path: Path
    manifest: dict[str, Any]
    items: Any          # pandas.DataFrame, one row per item
    timing: Any         # pandas.DataFrame, one row per timed call

    @property
    def metric_columns(self) -> dict[str, dict[str, Any]]:
        return dict(self.manifest.get("columns", {}))


def items_frame(records: Iterable[Mapping[str, Any]]):
    """Flatten journal records (``tags`` → ``tag_*``; ``metrics`` → columns) into a DataFrame."""
    import pandas as pd

    rows = []
    for r in records:
        row = {k: v for k, v in r.items() if k not in ("tags", "metrics", "notes")}
        row.update({f"tag_{k}": v for k, v in (r.get("tags") or {}).items()})
        row.update({k: _num(v) for k, v in (r.get("metrics") or {}).items()})
        row["notes"] = json.dumps(r.get("notes") or {}, sort_keys=True) if r.get("notes") else ""
        rows.append(row)
    df = pd.DataFrame(rows)
    first = [c for c in ITEM_ORDER if c in df.columns]
    return df[first + [c for c in df.columns if c not in first and c != "notes"]
              + (["notes"] if "notes" in df.columns else [])]


def _num(v: Any) -> float:
    """Metric value from JSON: null → NaN, "inf"/"-inf" → ±inf (see :func:`dumps`)."""
    if v is None:
        return float("nan")
    return float(v)


def load_run(run_dir: str | Path):
    """Read ``manifest.json`` and the journals of a run directory into a :class:`Run`."""
    import pandas as pd

    run_dir = Path(run_dir)
    mpath = run_dir / MANIFEST
    if not mpath.is_file():
        raise InputError("not a vocobench run directory (no manifest.json)", source=str(run_dir))
    try:
        manifest = json.loads(mpath.read_text(encoding="utf-8"))
    except json.JSONDecodeError as e:
        raise InputError(f"manifest is not valid JSON: {e}", source=str(mpath)) from None
    if manifest.get("format") != FORMAT:
        raise InputError(f"unsupported run format; expected {FORMAT}", source=str(mpath),
                         field="format", value=manifest.get("format"))
    items = _dedupe(read_jsonl(run_dir / ITEMS))
    timing = _dedupe_timing(read_jsonl(run_dir / TIMING))
    keys = manifest.get("job_keys")
    if keys is not None:            # drop records of an earlier, different sweep in this directory
        wanted = set(keys)
        items = [r for r in items if r.get("key") in wanted]
        timing = [r for r in timing if r.get("key") in wanted]
    return Run(run_dir, manifest, items_frame(items), pd.DataFrame(timing))


def _dedupe(records: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Last record per key wins (a re-run after a crash may repeat the item in flight)."""
    seen: dict[str, dict[str, Any]] = {}
    for r in records:
        seen[r.get("key", str(len(seen)))] = r
    return list(seen.values())


def _dedupe_timing(records: list[dict[str, Any]]) -> list[dict[str, Any]]:
    seen: dict[tuple, dict[str, Any]] = {}
    for r in records:
        seen[(r.get("key"), r["schedule"], r["sampler"], r["steps"], r["utt_id"], r["repeat"])] = r
    return list(seen.values())


def write_tables(run_dir: Path) -> Run:
    """Render ``items.csv`` and ``timing.csv`` from the journals; returns the loaded run."""
    run = load_run(run_dir)
    write_atomic(Path(run_dir) / "items.csv", run.items.to_csv(index=False))
    write_atomic(Path(run_dir) / "timing.csv", run.timing.to_csv(index=False))
    return run
