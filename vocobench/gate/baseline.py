"""Frozen baselines: a stored run reduced to one compact, versioned file to commit beside a model.

Format ``vocobench-baseline/1`` (JSON; gzip-compressed when the file name ends in ``.gz``)::

    {"format": "vocobench-baseline/1", "vocobench_version": ..., "created_utc": ...,
     "source": {"run_dir": ..., "run_created_utc": ...},
     "manifest": {...the run's manifest, without job_keys...},
     "recommendation": {...the run's report/recommendation.json...} | null,
     "items": [...one journal record per item, without audio paths...],
     "timing": [...the timing journal...]}

The recommendation (format in :mod:`vocobench.report.recommendation`) tells ``compare`` which
configuration ships (policy ``gated = "recommended"``); a run without a recorded one (``--no-report``)
gets it computed at freeze time from its ``[decide]`` options, nothing written into the run.

Items and timing are the records ``store.load_run`` keeps (last record per key, current job
keys only), so comparing a baseline with the run it was frozen from gives zero differences.
Each record sits on its own line, so a committed, uncompressed baseline diffs readably.
"""
from __future__ import annotations

import gzip
import json
import math
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import pandas as pd

from .. import __version__
from ..errors import InputError
from ..report.recommendation import (RECOMMENDATION_FILE, check_recommendation,
                                     read_recommendation, recommendation_document)
from ..report.render import decide, options_for
from ..store import ITEM_ORDER, Run, dumps, items_frame, load_run, write_atomic

BASELINE_FORMAT = "vocobench-baseline/1"
GZIP_MAGIC = b"\x1f\x8b"
DROPPED_ITEM_FIELDS = ("audio_path",)          # audio is not part of a baseline
DROPPED_MANIFEST_FIELDS = ("job_keys",)        # the items are already filtered to the run's jobs
BASELINE_KEY = "recommendation"   # the baseline's top-level key, kept in the loaded manifest


def _plain(v: Any) -> Any:
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.floating):
        v = float(v)
    if isinstance(v, float) and math.isnan(v):
        return None
    if v is pd.NA or v is pd.NaT:
        return None
    return v


def item_records(run: Run) -> list[dict[str, Any]]:
    """Journal-style records (``tags``, ``metrics``, ``notes`` nested) from a loaded run's items."""
    columns = set(run.metric_columns)
    known = set(ITEM_ORDER)
    out = []
    for row in run.items.to_dict(orient="records"):
        rec: dict[str, Any] = {"tags": {}, "metrics": {}}
        for k, v in row.items():
            v = _plain(v)
            if k in DROPPED_ITEM_FIELDS:
                continue
            if k == "notes":
                if v:
                    rec["notes"] = json.loads(v)
            elif k.startswith("tag_") and k not in known:
                if v is not None:
                    rec["tags"][k[4:]] = v
            elif k in columns:
                rec["metrics"][k] = v
            else:
                rec[k] = v
        out.append(rec)
    return out


def timing_records(run: Run) -> list[dict[str, Any]]:
    t = run.timing
    if t is None or not len(t):
        return []
    return [{k: _plain(v) for k, v in r.items()} for r in t.to_dict(orient="records")]


def run_recommendation(run: Run) -> dict[str, Any] | None:
    """The run's ``report/recommendation.json``, else the recommendation its ``[decide]``
    options give now (``None`` when the run has no metric values)."""
    path = Path(run.path) / RECOMMENDATION_FILE
    if path.is_file():
        return read_recommendation(path)
    opts, _, st, _, decision = decide(run, options_for(run, None))
    return recommendation_document(decision, opts) if st.columns else None


def baseline_text(run: Run) -> str:
    """The baseline document for a loaded run (one record per line)."""
    manifest = {k: v for k, v in run.manifest.items() if k not in DROPPED_MANIFEST_FIELDS}
    head = {"format": BASELINE_FORMAT, "vocobench_version": __version__,
            "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "source": {"run_dir": str(run.path), "run_created_utc": run.manifest.get("created_utc")}}
    parts = [dumps(head)[:-1], ', "manifest": ', dumps(manifest),
             f',\n"{BASELINE_KEY}": ', dumps(run_recommendation(run))]
    for name, recs in (("items", item_records(run)), ("timing", timing_records(run))):
        body = ",\n".join(dumps(r) for r in recs)
        parts.append(f',\n"{name}": [\n{body}\n]' if recs else f',\n"{name}": []')
    return "".join(parts) + "\n}\n"


def freeze(run_dir: str | Path, out: str | Path) -> Path:
    """Write the baseline of the run in ``run_dir`` to ``out`` (gzip if it ends in ``.gz``).

    Returns the path written. Raises :class:`InputError` if the run has no finished items.
    """
    run = load_run(run_dir)
    if run.items is None or not len(run.items):
        raise InputError("the run has no finished items to freeze", source=str(run_dir),
                         field="items.jsonl")
    out = Path(out)
    if out.is_dir():
        raise InputError("--out must be a file name, not a folder", source=str(out))
    data = baseline_text(run).encode("utf-8")
    if out.name.endswith(".gz"):
        data = gzip.compress(data, compresslevel=9, mtime=0)     # mtime 0: same run, same bytes
    write_atomic(out, data)
    return out


def load_baseline(path: str | Path) -> Run:
    """Read a baseline file into a :class:`~vocobench.store.Run` (``path`` = the file)."""
    path = Path(path)
    src = str(path)
    try:
        raw = path.read_bytes()
    except OSError as e:
        raise InputError(f"cannot read baseline: {e.strerror or e}", source=src) from None
    if raw[:2] == GZIP_MAGIC:
        try:
            raw = gzip.decompress(raw)
        except (OSError, EOFError) as e:
            raise InputError(f"corrupt gzip data: {e}", source=src) from None
    try:
        doc = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as e:
        raise InputError(f"not a vocobench baseline (invalid JSON: {e})", source=src) from None
    if not isinstance(doc, Mapping) or doc.get("format") != BASELINE_FORMAT:
        raise InputError(f"unsupported baseline format; expected {BASELINE_FORMAT}", source=src,
                         field="format", value=doc.get("format") if isinstance(doc, Mapping) else None)
    manifest, items, timing = doc.get("manifest"), doc.get("items"), doc.get("timing", [])
    if not isinstance(manifest, Mapping) or not isinstance(items, list) or not isinstance(timing, list):
        raise InputError("baseline lacks manifest/items/timing", source=src)
    frame = items_frame(items) if items else pd.DataFrame()
    manifest = dict(manifest)
    if doc.get(BASELINE_KEY) is not None:
        manifest[BASELINE_KEY] = check_recommendation(doc[BASELINE_KEY], f"{src}: {BASELINE_KEY}")
    return Run(path, manifest, frame, pd.DataFrame(timing))


def load_side(side: "str | Path | Run") -> Run:
    """A stored run directory, a baseline file, or an already loaded :class:`Run`."""
    if isinstance(side, Run):
        return side
    p = Path(side)
    if p.is_dir():
        return load_run(p)
    if p.is_file():
        return load_baseline(p)
    raise InputError("neither a run directory nor a baseline file", source=str(p))
