"""Building the metric objects of a run from ``[metrics] use`` and ``[metrics.options]``:
registered names and users' ``package.module:object`` targets alike."""
from __future__ import annotations

from typing import Any, Mapping, Sequence

from ..errors import InputError
from .base import (DEFAULT_METRICS, METRICS_EXTRA, NAMES_FIELD, OPTIONS_FIELD, REGISTRY, Metric,
                   metric_class, missing_requirements)
from .external import check_distinct, is_target, load_metric


def build_metrics(names: Sequence[str] = DEFAULT_METRICS,
                  options: Mapping[str, Mapping[str, Any]] | None = None,
                  source: str | None = None) -> list[Metric]:
    """Instantiate metrics by registry name, or a user's ``package.module:object`` /
    ``file.py:object`` target (see :mod:`.external`), with per-metric ``options``.

    Raises InputError for an unknown name, an unknown option or a bad option value, a metric
    whose optional extra is not installed, and metric or column names used twice.
    Options for known metrics that are not selected are checked too (typos surface early).
    """
    valid = ", ".join(REGISTRY) + ", or a 'package.module:object' target"
    if isinstance(names, str) or not isinstance(names, Sequence):
        raise InputError("must be a list of metric names", source=source, field=NAMES_FIELD,
                         value=names)
    if not names:
        raise InputError(f"no metrics selected; valid names: {valid}", source=source,
                         field=NAMES_FIELD)
    options = dict(options or {})
    for keys, where in ((names, NAMES_FIELD), (options, OPTIONS_FIELD)):
        for key in keys:
            if key not in REGISTRY and not is_target(key):
                raise InputError(f"unknown metric '{key}'; valid names: {valid}", source=source,
                                 field=where, value=key)
    seen = set()
    for n in names:
        if n in seen:
            raise InputError(f"metric '{n}' is listed twice", source=source, field=NAMES_FIELD,
                             value=n)
        seen.add(n)
    for key, opts in options.items():
        if not isinstance(opts, Mapping):
            raise InputError("metric options must be a table of name = value", source=source,
                             field=f"{OPTIONS_FIELD}.{key}", value=opts)
        if key not in seen:
            if is_target(key):
                raise InputError("options for a metric target that is not in [metrics] use",
                                 source=source, field=f"{OPTIONS_FIELD}.{key}", value=key)
            metric_class(key)(opts, source=source)
    built = [load_metric(n, options.get(n), source) if is_target(n) else
             _builtin(n, options.get(n), source) for n in names]
    check_distinct(built, source)
    return built


def _builtin(name: str, opts: Mapping[str, Any] | None, source: str | None) -> Metric:
    missing = missing_requirements(name)
    if missing:
        raise InputError(f"metric '{name}' needs {', '.join(missing)} (not installed): "
                         f"pip install 'vocobench[{METRICS_EXTRA}]'", source=source,
                         field=NAMES_FIELD, value=name)
    return metric_class(name)(opts, source=source)
