"""Bring your own metric: ``[metrics] use`` entries naming ``package.module:object`` or
``path/to/file.py:object``.

The object is either

* a subclass (or an instance) of :class:`~vocobench.metrics.Metric` — the full contract of the
  built-in metrics, options included; or
* any class (or instance) with

  - ``name``: a short identifier, unique in the run;
  - ``columns``: a sequence of :class:`~vocobench.metrics.Column` or of mappings
    ``{"name", "unit", "higher_is_better" (true / false / null for a diagnostic column),
    "range" ([low, high], infinities allowed), "description" (optional)}``;
  - ``prepare(reference, sample_rate) -> state``: reference-side analysis, run once per utterance
    and reused for every output of it (any picklable value);
  - ``score(state, estimate, sample_rate) -> {column: float}``: the values for one output;
  - optional: ``description`` (one line), ``version`` (str), ``needs_finite_estimate`` (bool,
    default true: estimates with NaN/Inf samples are reported unavailable without calling score).

Signals arrive as 1-D float arrays at the vocoder's rate, of equal length (the run's length
policy). Raise :class:`vocobench.errors.MetricUnavailable` for an input that cannot be scored (the
item keeps NaN and the reason). Options come from ``[metrics.options."TARGET"]`` (TARGET as written
in ``use``) and are passed to the class as keyword arguments. A relative ``file.py`` path is taken
from the config file's folder; modules are imported from the vocoder's search path.

A loaded metric records its provenance — target, code fingerprint of its module and package
(:func:`vocobench.fingerprint.code_fingerprint`) and ``version`` — in ``variant()``, hence in the
job cache key and the manifest: edited metric code re-scores the items, and ``compare`` refuses a
baseline scored by different code.
"""
from __future__ import annotations

import inspect
import math
import re
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import InputError
from .base import NAMES_FIELD, OPTIONS_FIELD, REGISTRY, Column, Metric

IDENTIFIER = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
# Keys of an items.jsonl record (DEVELOPERS.md, run directory format): not usable as column names.
RESERVED_COLUMNS = frozenset({
    "key", "utt_id", "utt_sha", "tags", "schedule", "sampler", "steps", "nfe", "seed",
    "duration_s", "synth_s", "rtf", "ms_per_nfe", "audio_sha", "audio_path", "length_diff",
    "status", "failure", "metrics", "notes"})


def is_target(name: Any) -> bool:
    return isinstance(name, str) and ":" in name


class ObjectMetric(Metric):
    """Adapter: a user's object with ``name``, ``columns``, ``prepare`` and ``score`` as a Metric."""

    def __init__(self, obj: Any, target: str, options: Mapping[str, Any] | None = None,
                 source: str | None = None):
        self.obj = obj
        self.target = target
        self.name = _identifier(getattr(obj, "name", None), "name", target, source)
        super().__init__(None, source=source)          # no options_spec: the object's own
        self.options = dict(options or {})             # constructor took and checked them
        self.description = str(getattr(obj, "description", "") or f"user metric {target}")
        self.needs_finite_estimate = bool(getattr(obj, "needs_finite_estimate", True))
        for method in ("prepare", "score"):
            if not callable(getattr(obj, method, None)):
                raise InputError(f"a metric object needs a {method}() method", source=source,
                                 field=NAMES_FIELD, value=target)
        raw = getattr(obj, "columns", None)
        if isinstance(raw, (str, bytes)) or not isinstance(raw, Sequence) or not raw:
            raise InputError("a metric object needs 'columns', a non-empty list", source=source,
                             field=NAMES_FIELD, value=target)
        self._columns = tuple(_column(c, target, source) for c in raw)

    @property
    def columns(self) -> tuple[Column, ...]:
        return self._columns

    @property
    def sample_rate(self) -> int | None:
        return getattr(self.obj, "sample_rate", None)

    def _prepare(self, reference: np.ndarray, sr: int) -> Any:
        return self.obj.prepare(reference, sr)

    def _score(self, data: Any, estimate: np.ndarray, sr: int) -> Mapping[str, float]:
        return self.obj.score(data, estimate, sr)

    def __repr__(self) -> str:
        return f"<user metric {self.name} from {self.target}>"


def load_metric(target: str, options: Mapping[str, Any] | None = None,
                source: str | None = None) -> Metric:
    """Import, construct and check the metric named by ``target``; record its provenance."""
    from ..targets import resolve
    from ..fingerprint import code_fingerprint

    options = dict(options or {})
    try:
        obj = resolve(_located(target, source))
    except InputError as e:
        raise InputError(_bare(e), source=source, field=NAMES_FIELD, value=target) from None
    code = code_fingerprint(obj)
    if inspect.isclass(obj) and issubclass(obj, Metric):
        metric = obj(options, source=source)
    elif isinstance(obj, Metric):
        _no_options(options, target, source)
        metric = obj
    else:
        if inspect.isclass(obj) or (callable(obj) and not callable(getattr(obj, "score", None))):
            obj = _construct(obj, options, target, source)
        else:
            _no_options(options, target, source)
        metric = ObjectMetric(obj, target, options, source)
    _identifier(metric.name, "name", target, source)
    if metric.name in REGISTRY:
        raise InputError(f"metric name '{metric.name}' is taken by a built-in metric",
                         source=source, field=NAMES_FIELD, value=target)
    for c in metric.columns:
        _column(c, target, source)
    version = getattr(metric, "version", None) or getattr(getattr(metric, "obj", None),
                                                          "version", None)
    metric.provenance = {"target": target, "code": code,
                         "version": None if version is None else str(version)}
    return metric


def check_distinct(metrics: Sequence[Metric], source: str | None = None) -> None:
    """Metric names and column names must be unique across the selected metrics."""
    names: dict[str, str] = {}
    columns: dict[str, str] = {}
    for m in metrics:
        if m.name in names:
            raise InputError(f"two metrics are named '{m.name}'", source=source,
                             field=NAMES_FIELD, value=m.name)
        names[m.name] = m.name
        for c in m.columns:
            if c.name in columns:
                raise InputError(f"column '{c.name}' of metric '{m.name}' is also a column of "
                                 f"metric '{columns[c.name]}'", source=source, field=NAMES_FIELD,
                                 value=c.name)
            columns[c.name] = m.name


# -- helpers -------------------------------------------------------------------------------------
def _located(target: str, source: str | None) -> str:
    """A relative ``file.py`` target is taken from the config file's folder when it exists there."""
    path, _, attr = target.rpartition(":")
    if not path.endswith(".py") or Path(path).is_absolute() or not source:
        return target
    candidate = Path(source).parent / path
    return f"{candidate.resolve()}:{attr}" if candidate.is_file() else target


def _bare(e: InputError) -> str:
    """The message of an InputError without its 'field ...:' prefix and '(got ...)' suffix."""
    text = str(e)
    if e.field and f"field '{e.field}': " in text:
        text = text.split(f"field '{e.field}': ", 1)[1]
    if e.value is not None and text.endswith(f" (got {e.value!r})"):
        text = text[: -len(f" (got {e.value!r})")]
    return text


def _construct(factory: Any, options: Mapping[str, Any], target: str, source: str | None) -> Any:
    where = f"{OPTIONS_FIELD}.{target}"
    try:
        inspect.signature(factory).bind(**options)
    except TypeError as e:
        raise InputError(f"options do not fit {target}: {e}", source=source, field=where,
                         value=sorted(options)) from None
    except ValueError:
        pass
    try:
        return factory(**options)
    except InputError:
        raise
    except Exception as e:
        raise InputError(f"constructing the metric failed: {type(e).__name__}: {e}",
                         source=source, field=where, value=target) from None


def _no_options(options: Mapping[str, Any], target: str, source: str | None) -> None:
    if options:
        raise InputError("options were given but the target is already an instance",
                         source=source, field=f"{OPTIONS_FIELD}.{target}", value=sorted(options))


def _identifier(value: Any, what: str, target: str, source: str | None) -> str:
    if not isinstance(value, str) or not IDENTIFIER.match(value):
        raise InputError(f"metric {what} must be an identifier (letter, then letters, digits, _), "
                         f"got {value!r}", source=source, field=NAMES_FIELD, value=target)
    return value


def _column(c: Any, target: str, source: str | None) -> Column:
    """A Column from a Column or a mapping; checks name, unit, direction and range."""
    def bad(msg: str) -> InputError:
        return InputError(f"column {msg}", source=source, field=NAMES_FIELD, value=target)

    if isinstance(c, Mapping):
        unknown = set(c) - {"name", "unit", "higher_is_better", "range", "valid_range",
                            "description"}
        if unknown:
            raise bad(f"has unknown keys {sorted(unknown)}")
        missing = {"name", "unit", "higher_is_better"} - set(c)
        if missing or not ({"range", "valid_range"} & set(c)):
            raise bad(f"needs name, unit, higher_is_better and range: {dict(c)!r}")
        c = Column(c["name"], c["unit"], c["higher_is_better"],
                   c.get("range", c.get("valid_range")), c.get("description", ""))
    if not isinstance(c, Column):
        raise bad(f"must be a Column or a mapping, got {type(c).__name__}")
    name = _identifier(c.name, "column name", target, source)
    if name in RESERVED_COLUMNS:
        raise bad(f"name '{name}' is a field of the item records")
    if not isinstance(c.unit, str) or not c.unit:
        raise bad(f"'{name}': unit must be a non-empty string")
    if not isinstance(c.higher_is_better, (bool, type(None))):
        raise bad(f"'{name}': higher_is_better must be true, false or null")
    try:
        lo, hi = (float(v) for v in c.valid_range)
    except (TypeError, ValueError):
        raise bad(f"'{name}': range must be [low, high]") from None
    if math.isnan(lo) or math.isnan(hi) or not lo < hi:
        raise bad(f"'{name}': range must have low < high")
    return Column(name, c.unit, c.higher_is_better, (lo, hi), str(c.description or ""))
