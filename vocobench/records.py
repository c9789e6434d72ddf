"""Checks of what a run directory holds: journal records (items, timing) and the manifest.

Each check raises :class:`~vocobench.errors.InputError` naming the file (and line), the field and
the value, so a hand-edited or damaged run directory is reported on one line."""
from __future__ import annotations

from pathlib import Path
from typing import Any, Callable

from .errors import InputError

FORMAT = "vocobench-run/1"


def _short(v: Any) -> Any:
    text = repr(v)
    return v if len(text) <= 60 else text[:57] + "..."


def _is_int(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _is_num(v: Any) -> bool:
    return v is None or v in ("inf", "-inf") or (isinstance(v, (int, float)) and not isinstance(v, bool))


def _is_rel(v: Any) -> bool:            # a saved-audio path must stay inside the run directory
    return v is None or (isinstance(v, str) and not Path(v).is_absolute() and ".." not in Path(v).parts)


_TEXT = (lambda v: isinstance(v, str), "a string")
_RECORD_FIELDS: dict[str, tuple[Callable[[Any], bool], str]] = {
    "key": _TEXT, "utt_id": _TEXT, "schedule": _TEXT, "sampler": _TEXT,
    "steps": (_is_int, "an integer"), "seed": (_is_int, "an integer"),
    "repeat": (_is_int, "an integer"), "nfe": (lambda v: v is None or _is_int(v), "an integer"),
    "status": (lambda v: v in ("ok", "failed"), '"ok" or "failed"'),
    "metrics": (lambda v: v is None or isinstance(v, dict), "a table of numbers (or null)"),
    "tags": (lambda v: v is None or isinstance(v, dict), "a table"),
    "notes": (lambda v: v is None or isinstance(v, dict), "a table"),
    "audio_path": (_is_rel, "a path inside the run directory"),
    **{k: (_is_num, "a number (or null)") for k in (
        "duration_s", "synth_s", "rtf", "ms_per_nfe", "length_diff", "seconds")},
}
ITEM_REQUIRED = ("key", "utt_id", "schedule", "sampler", "steps", "status")
TIMING_REQUIRED = ("schedule", "sampler", "steps", "utt_id", "repeat")


def _record_check(required: tuple[str, ...]) -> Callable[[dict[str, Any], str], None]:
    def check(rec: dict[str, Any], where: str) -> None:
        for name in required:
            if name not in rec:
                raise InputError("record lacks a required field", source=where, field=name)
        for name, value in rec.items():
            ok, what = _RECORD_FIELDS.get(name, (None, ""))
            if ok is not None and not ok(value):
                raise InputError(f"must be {what}", source=where, field=name, value=_short(value))
        for col, value in (rec.get("metrics") or {}).items():
            if not _is_num(value):
                raise InputError("must be a number (or null)", source=where,
                                 field=f"metrics.{col}", value=_short(value))
    return check


check_item, check_timing = _record_check(ITEM_REQUIRED), _record_check(TIMING_REQUIRED)


def check_manifest(m: Any, source: str) -> None:
    """Raise :class:`InputError` naming the field if a (hand-edited) manifest is malformed."""
    if not isinstance(m, dict):
        raise InputError("manifest must be a JSON object", source=source, value=_short(m))
    if m.get("format") != FORMAT:
        raise InputError(f"unsupported run format; expected {FORMAT}", source=source,
                         field="format", value=m.get("format"))
    for name, kind in (("columns", dict), ("grid", list), ("job_keys", list), ("dataset", dict),
                       ("decide", dict), ("vocoder", dict), ("timing", dict), ("seeds", list),
                       ("metrics", dict)):
        if m.get(name) is not None and not isinstance(m[name], kind):
            raise InputError(f"must be a JSON {'object' if kind is dict else 'list'}",
                             source=source, field=name, value=_short(m[name]))
    for i, g in enumerate(m.get("grid") or []):
        if not (isinstance(g, dict) and isinstance(g.get("schedule"), str)
                and isinstance(g.get("sampler"), str) and _is_int(g.get("steps"))):
            raise InputError("grid entry must have schedule, sampler (text) and steps (integer)",
                             source=source, field=f"grid[{i}]", value=_short(g))
    for name, spec in (m.get("columns") or {}).items():
        if not isinstance(spec, dict):
            raise InputError("must be a JSON object", source=source, field=f"columns.{name}",
                             value=_short(spec))
    if not all(isinstance(k, str) for k in m.get("job_keys") or []):
        raise InputError("job keys must be strings", source=source, field="job_keys")
    utts = (m.get("dataset") or {}).get("utterances") or []
    if not isinstance(utts, list) or not all(isinstance(u, dict) for u in utts):
        raise InputError("must be a list of JSON objects", source=source,
                         field="dataset.utterances", value=_short(utts))
