"""Results store: a self-describing run directory.

Layout (``RUN_DIR/``):

* ``manifest.json`` — config, vocoder, front-end, metric variants and columns, dataset fingerprint,
  grid, seeds, timing settings, hardware and package versions (written atomically);
* ``items.jsonl`` — journal, one JSON object per finished item, written the moment the item
  finishes (a killed run loses at most the item in flight) and fsync'd within a second (an
  operating-system crash loses at most that second's items);
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
import re
import tempfile
import threading
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping

import numpy as np

from .errors import InputError
from .records import (FORMAT, ITEM_REQUIRED, TIMING_REQUIRED, _short,  # noqa: F401
                      check_item, check_manifest, check_timing)
from .textfmt import csv_text

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
    t = type(o)                 # exact built-in types first: typing's ABC checks are slow
    if t is str or t is int or t is bool or o is None:
        return o
    if isinstance(o, float):
        return o if math.isfinite(o) else None if math.isnan(o) else ("inf" if o > 0 else "-inf")
    if t is dict or isinstance(o, Mapping):
        return {k: _nan_to_none(v) for k, v in o.items()}
    if t is list or isinstance(o, (list, tuple)):
        return [_nan_to_none(v) for v in o]
    return _nan_to_none(float(o)) if isinstance(o, np.floating) else o


def current_umask() -> int:
    """This process's umask (read from ``/proc`` where it can be, so no thread sees it change)."""
    try:
        status = Path("/proc/self/status").read_text(encoding="ascii")
        return int(re.search(r"^Umask:\s*([0-7]+)", status, re.M).group(1), 8)  # type: ignore[union-attr]
    except (OSError, ValueError, AttributeError):   # no /proc (macOS): set it back at once
        old = os.umask(0o022)
        os.umask(old)
        return old


def check_writable(path: str | Path, *, field: str, source: str | None = None) -> None:
    """Raise :class:`InputError` unless ``path`` is, or can be made, a writable folder: it must
    not be a file, nor lie below one, nor on a read-only or forbidden filesystem."""
    p = Path(path)
    here = p
    while not here.exists() and here != here.parent:
        here = here.parent
    if not here.is_dir():
        what = "is a file" if here == p else f"lies below a file ({here})"
        raise InputError(f"must be a folder, but it {what}", source=source, field=field,
                         value=str(p))
    if not os.access(here, os.W_OK | os.X_OK):
        try:
            ro = bool(os.statvfs(here).f_flag & os.ST_RDONLY)
        except OSError:
            ro = False
        why = "on a read-only file system" if ro else "not writable (permission denied)"
        raise InputError(f"cannot write there: {here} is {why}", source=source, field=field,
                         value=str(p))


def check_output_file(path: str | Path, *, field: str, source: str | None = "command line") -> None:
    """Raise :class:`InputError` unless ``path`` can be written as a file (see
    :func:`check_writable` for its folder)."""
    p = Path(path)
    if p.is_dir():
        raise InputError("must be a file path, but it is a folder", source=source, field=field,
                         value=str(p))
    check_writable(p.parent, field=field, source=source)


def write_atomic(path: Path, text: str | bytes) -> None:
    """Write a file so that readers see the old or the new content, never a half-written one.

    The file gets the usual mode for new files (0666 less the umask), not the 0600 of a
    temporary file."""
    data = text.encode("utf-8") if isinstance(text, str) else text
    path = Path(path)
    if path.is_dir():
        raise InputError("must be a file path, but it is a folder", field="output", value=str(path))
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        os.fchmod(fd, 0o666 & ~current_umask())
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


# Group commit (common practice in databases): each record is written to the operating system at
# once, so a killed process loses nothing journalled, and made durable on disk by an fsync at most
# this many seconds later, from a background thread, so per-item fsyncs do not stall the sweep.
SYNC_INTERVAL_S = 1.0


class Journal:
    """Append-only JSON-lines file. Each record is written and flushed on append (it survives a
    killed process); an fsync follows within ``sync_interval_s`` (0: on every append) and on
    :meth:`close`, so an operating-system crash loses at most the last interval's records."""

    def __init__(self, path: Path, sync_interval_s: float = SYNC_INTERVAL_S) -> None:
        self.path = Path(path)
        self.interval = sync_interval_s
        self._f = None
        self._written = self._synced = 0      # records flushed / covered by an fsync
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def append(self, record: Mapping[str, Any]) -> None:
        if self._f is None:
            self._repair_tail()
            self._f = open(self.path, "a", encoding="utf-8")
            if self.interval > 0:
                self._stop.clear()
                self._thread = threading.Thread(target=self._syncer, daemon=True,
                                                name=f"fsync {self.path.name}")
                self._thread.start()
        self._f.write(dumps(record) + "\n")
        self._f.flush()
        self._written += 1                    # after the flush: an fsync that sees it covers it
        if self.interval <= 0:
            self.sync()

    def sync(self) -> None:
        """fsync what has been appended, if anything is pending."""
        with self._lock:
            n = self._written
            if self._f is not None and n > self._synced:
                os.fsync(self._f.fileno())
                self._synced = n

    def _syncer(self) -> None:
        while not self._stop.wait(self.interval):
            self.sync()

    def _repair_tail(self) -> None:
        """Drop a torn last line left by a kill mid-write."""
        if not self.path.exists():
            return
        with open(self.path, "rb+") as f:          # look at the end only: journals grow large
            size = f.seek(0, os.SEEK_END)
            if size == 0:
                return
            f.seek(size - 1)
            if f.read(1) == b"\n":
                return
            pos = size                              # scan back, a block at a time, to the last \n
            while pos > 0:
                start = max(0, pos - 65536)
                f.seek(start)
                cut = f.read(pos - start).rfind(b"\n")
                if cut >= 0:
                    pos = start + cut + 1
                    break
                pos = start
            f.truncate(pos)
            f.flush()
            os.fsync(f.fileno())

    def close(self) -> None:
        if self._thread is not None:
            self._stop.set()
            self._thread.join()
            self._thread = None
        self.sync()
        if self._f is not None:
            self._f.close()
            self._f = None


def read_jsonl(path: Path, check: Callable[[dict[str, Any], str], None] | None = None
               ) -> list[dict[str, Any]]:
    """Records of a journal; a torn final line (crash mid-write) is ignored. Each record must be
    a JSON object, and passes ``check(record, "path:line")`` if given."""
    path = Path(path)
    if not path.exists():
        return []
    out = []
    lines = path.read_text(encoding="utf-8").split("\n")
    for i, line in enumerate(lines):
        if not line.strip():
            continue
        try:
            rec = json.loads(line)
        except json.JSONDecodeError:
            if i >= len(lines) - 2:          # last line, possibly torn
                break
            raise InputError("corrupt journal line", source=str(path), field=f"line {i + 1}")
        if not isinstance(rec, dict):
            raise InputError("journal line is not a JSON object", source=f"{path}:{i + 1}",
                             value=_short(rec))
        if check is not None:
            check(rec, f"{path}:{i + 1}")
        out.append(rec)
    return out


class RunLock:
    """Exclusive lock on a run directory, so two runs never write one directory."""

    def __init__(self, run_dir: Path) -> None:
        self.path = Path(run_dir) / ".lock"
        self._fd: int | None = None

    def __enter__(self) -> "RunLock":
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o666)
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
    ignored: dict[str, int] = field(default_factory=dict)   # records of other grids, dropped

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
    """Read ``manifest.json`` and the journals of a run directory into a :class:`Run`.

    Every record is checked (a hand-edited value is an :class:`InputError` naming file, line
    and field); records of another grid in the same folder are dropped and counted in
    ``Run.ignored``."""
    import pandas as pd

    run_dir = Path(run_dir)
    mpath = run_dir / MANIFEST
    if not mpath.is_file():
        raise InputError("not a vocobench run directory (no manifest.json)", source=str(run_dir))
    try:
        manifest = json.loads(mpath.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as e:
        raise InputError(f"manifest is not valid JSON: {e}", source=str(mpath)) from None
    check_manifest(manifest, str(mpath))
    items = _dedupe(read_jsonl(run_dir / ITEMS, check_item))
    timing = _dedupe_timing(read_jsonl(run_dir / TIMING, check_timing))
    keys = manifest.get("job_keys")
    ignored = {"items": 0, "timing": 0}
    if keys is not None:            # drop records of an earlier, different sweep in this directory
        wanted = set(keys)
        ignored = {"items": sum(r.get("key") not in wanted for r in items),
                   "timing": sum(r.get("key") not in wanted for r in timing)}
        # the plan's order, not the order items finished in: with several workers that order
        # changes from run to run, and resampling statistics must not depend on it
        order = {k: i for i, k in enumerate(keys)}
        items = sorted((r for r in items if r.get("key") in wanted), key=lambda r: order[r["key"]])
        timing = [r for r in timing if r.get("key") in wanted]
    return Run(run_dir, manifest, items_frame(items), pd.DataFrame(timing), ignored)


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
    write_atomic(Path(run_dir) / "items.csv", csv_text(run.items))
    write_atomic(Path(run_dir) / "timing.csv", csv_text(run.timing))
    return run
