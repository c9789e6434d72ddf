"""Tables read off a stored run: its configurations, per-utterance means, failures and latency.

The unit is the utterance: :func:`utterance_means` averages the ``ok`` seeds of an utterance, so
every utterance counts once whatever the number of seeds. Items with ``status == "failed"`` are
left out of every mean and counted per configuration by :func:`failure_counts`.
"""
from __future__ import annotations

import re
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

from .errors import InputError
from .keys import CONFIG_KEYS, ConfigKey, labels


def configurations(manifest: Mapping[str, Any], items: pd.DataFrame) -> list[ConfigKey]:
    """Configurations that have items, in grid order (then any extra ones in item order)."""
    seen: dict[ConfigKey, None] = {}
    for g in manifest.get("grid") or []:
        try:
            seen[ConfigKey.of(g)] = None
        except (KeyError, TypeError, ValueError):
            raise InputError("grid entry lacks schedule/sampler/steps", source="manifest.json",
                             field="grid", value=g) from None
    present: dict[ConfigKey, None] = {}
    if len(items):
        for s, a, n in items[list(CONFIG_KEYS)].itertuples(index=False):
            present.setdefault(ConfigKey(str(s), str(a), int(n)), None)
    for c in present:
        seen.setdefault(c, None)
    return [c for c in seen if c in present]


def default_reference(configs: Sequence[ConfigKey]) -> ConfigKey:
    """The configuration with the most steps; ties go to the first in grid order."""
    if not configs:
        raise InputError("the run has no configurations with items", field="items.jsonl")
    best = max(c.steps for c in configs)
    return next(c for c in configs if c.steps == best)


def require_item_fields(items: pd.DataFrame, source: str) -> None:
    """Raise :class:`InputError` unless ``items`` has the configuration keys and ``utt_id``."""
    missing = [k for k in (*CONFIG_KEYS, "utt_id") if k not in items.columns]
    if missing:
        raise InputError("items lack required fields", source=source, field=missing[0])


def ok_mask(items: pd.DataFrame) -> pd.Series:
    """Rows with ``status == "ok"`` (every row when there is no ``status`` column)."""
    if "status" not in items.columns:
        return pd.Series(True, index=items.index)
    return items["status"].astype(str) == "ok"


def utterance_means(items: pd.DataFrame, column: str, configs: Sequence[ConfigKey],
                    key: str = "utt_id") -> pd.DataFrame:
    """Per-utterance mean of ``column`` over the ``ok`` seeds: rows utterances, columns labels.

    ``key`` is the column identifying an utterance (rows are indexed by it, in item order).
    """
    cols = [c.label for c in configs]
    utts = list(dict.fromkeys(items[key].astype(str)))
    if column not in items.columns:
        return pd.DataFrame(np.nan, index=pd.Index(utts, name=key), columns=cols)
    ok = items[ok_mask(items)]
    frame = pd.DataFrame({"config": labels(ok), key: ok[key].astype(str),
                          "v": pd.to_numeric(ok[column], errors="coerce")})
    table = frame.groupby([key, "config"], sort=False)["v"].mean().unstack("config")
    return table.reindex(index=pd.Index(utts, name=key), columns=cols)


def failure_counts(items: pd.DataFrame, configs: Sequence[ConfigKey]) -> pd.DataFrame:
    """Items and failed items per configuration (index: labels)."""
    lab = labels(items)
    failed = ~ok_mask(items)
    out = pd.DataFrame({"items": lab.value_counts(), "failed": lab[failed].value_counts()})
    return out.reindex([c.label for c in configs]).fillna(0).astype(int)


def failure_reason(message: Any) -> str:
    """The kind of a failure message, for grouping: its text before the first ``": "`` (e.g.
    ``vocoder raised RuntimeError``), digits replaced by ``#``."""
    text = str(message or "unknown failure").split(": ", 1)[0].strip()
    return re.sub(r"\d+", "#", text)


def failure_reasons(items: pd.DataFrame) -> pd.DataFrame:
    """Failed items grouped by :func:`failure_reason`, most frequent first: ``reason``,
    ``count``, ``first`` (the first message verbatim) and ``configs`` (labels, grid order)."""
    cols = ["reason", "count", "first", "configs"]
    if not len(items) or "status" not in items.columns:
        return pd.DataFrame(columns=cols)
    bad = items[~ok_mask(items)]
    msgs = bad["failure"] if "failure" in bad.columns else pd.Series("", index=bad.index)
    rows: dict[str, dict[str, Any]] = {}
    for msg, lab in zip(msgs, labels(bad)):
        r = rows.setdefault(failure_reason(msg), {"count": 0, "first": str(msg or ""), "configs": []})
        r["count"] += 1
        if lab not in r["configs"]:
            r["configs"].append(lab)
    out = pd.DataFrame([{"reason": k, **v} for k, v in rows.items()], columns=cols)
    return out.sort_values("count", ascending=False, kind="stable").reset_index(drop=True)


def nfe_map(manifest: Mapping[str, Any], items: pd.DataFrame) -> dict[str, int]:
    """Network evaluations per configuration label: the items' ``nfe``, overridden by the grid's."""
    out: dict[str, int] = {}
    if "nfe" in items.columns:
        for lab, n in zip(labels(items), pd.to_numeric(items["nfe"], errors="coerce")):
            if np.isfinite(n):
                out.setdefault(lab, int(n))
    for g in manifest.get("grid") or []:
        if g.get("nfe") is not None:
            out[ConfigKey.of(g).label] = int(g["nfe"])
    return out


def latency_summary(timing: pd.DataFrame, items: pd.DataFrame, configs: Sequence[ConfigKey],
                    nfe: Mapping[str, int]) -> pd.DataFrame:
    """Latency per configuration from the timing journal (repeat ≥ 0; repeat −1 reported apart).

    Columns: ``nfe, rtf_median, rtf_p90, ms_per_nfe, first_call_s, n_timed, latency_source,
    threads, batch``. ``latency_source`` says how the figure was obtained: ``timing`` (the timing
    phase's own calls), ``sweep (uncontended)`` (the one-worker sweep's calls, kept as timing
    samples), both joined by ``+``, or ``sweep`` (below); ``threads`` and ``batch`` are those of
    the timed calls.
    ``rtf_p90`` is numpy's default (linear) 90th percentile. A configuration absent from the
    timing journal falls back to the sweep's own timings (``latency_source = "sweep"``), which
    are contended when the sweep ran with several workers.
    """
    rows = []
    tlab = labels(timing) if len(timing) and set(CONFIG_KEYS) <= set(timing.columns) else None
    ilab = labels(items)
    for c in configs:
        n = int(nfe.get(c.label, c.steps))
        row: dict[str, Any] = {"config": c.label, "nfe": n, "rtf_median": np.nan, "rtf_p90": np.nan,
                               "ms_per_nfe": np.nan, "first_call_s": np.nan, "n_timed": 0,
                               "latency_source": "none", "threads": np.nan, "batch": np.nan}
        src = timing[tlab == c.label] if tlab is not None else timing.iloc[0:0]
        if len(src):
            rep = pd.to_numeric(src["repeat"], errors="coerce") if "repeat" in src.columns \
                else pd.Series(0, index=src.index)
            timed, first = src[rep >= 0], src[rep == -1]
            rtf = pd.to_numeric(timed.get("rtf"), errors="coerce").dropna().to_numpy()
            if rtf.size:
                row.update(rtf_median=float(np.median(rtf)), rtf_p90=float(np.percentile(rtf, 90)),
                           n_timed=int(rtf.size), latency_source=_sources(timed))
                row["ms_per_nfe"] = _ms_per_nfe(timed, n)
                for col in ("threads", "batch"):
                    v = pd.to_numeric(timed.get(col), errors="coerce").dropna() \
                        if col in timed.columns else ()
                    if len(v) and v.nunique() == 1:
                        row[col] = int(v.iloc[0])
            secs = pd.to_numeric(first.get("seconds"), errors="coerce").dropna().to_numpy()
            if secs.size:
                row["first_call_s"] = float(np.median(secs))
        if row["latency_source"] == "none":
            sw = items[(ilab == c.label) & ok_mask(items)]
            rtf = pd.to_numeric(sw.get("rtf"), errors="coerce").dropna().to_numpy() if len(sw) else []
            if len(rtf):
                row.update(rtf_median=float(np.median(rtf)), rtf_p90=float(np.percentile(rtf, 90)),
                           n_timed=int(len(rtf)), latency_source="sweep")
                row["ms_per_nfe"] = _ms_per_nfe(sw, n)
        rows.append(row)
    return pd.DataFrame(rows).set_index("config")


SOURCE_NAMES = {"timing": "timing", "sweep": "sweep (uncontended)"}


def _sources(timed: pd.DataFrame) -> str:
    """How timed rows were obtained: their ``source`` values (``timing`` when absent)."""
    if "source" not in timed.columns:
        return "timing"
    found = timed["source"].fillna("timing").astype(str)
    return "+".join(SOURCE_NAMES.get(v, v) for v in sorted(set(found), reverse=True))


def _ms_per_nfe(frame: pd.DataFrame, nfe: int) -> float:
    if "ms_per_nfe" in frame.columns:
        v = pd.to_numeric(frame["ms_per_nfe"], errors="coerce").dropna().to_numpy()
        if v.size:
            return float(np.median(v))
    s = pd.to_numeric(frame.get("seconds", frame.get("synth_s")), errors="coerce").dropna().to_numpy()
    return float(np.median(s) * 1e3 / max(nfe, 1)) if s.size else np.nan
