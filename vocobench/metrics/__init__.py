"""Objective metrics: each scores a vocoder output against its reference recording.

Usage::

    metrics = build_metrics(["mcd", "pesq_wb", "stoi"], options={"mcd": {"order": 24}},
                            source="config.toml")
    state = m.prepare(reference, sr)        # once per utterance, reused for every config/seed
    values = m.score(state, estimate, sr)   # {column: float}; raises MetricUnavailable

Inputs are 1-D float arrays at the vocoder rate, of equal length (see :class:`LengthPolicy`).
``m.variant(sample_rate)`` records exactly how a metric was computed.

How to add a metric
-------------------
Write one module in ``vocobench/metrics/`` (not named after a third-party package) with a
subclass of :class:`Metric` that sets ``name``, a one-line ``description`` and
``options_spec`` (a :class:`~vocobench.params.Table` of its options: name, type, range,
default, description, plus cross-option rules such as ``("fmin", "<", "fmax")``), and implements
``columns`` (a tuple of :class:`Column`: name, unit, whether higher is better, range of
possible values, description), ``_prepare(reference, sr)`` (reference-side analysis, return
anything picklable) and ``_score(data, estimate, sr)`` (return one float per column). Raise
``MetricUnavailable(reason)`` when an input cannot be scored; input checks, NaN handling and
option parsing are done by the base class. Override ``sample_rate`` if the metric works at a
fixed rate and ``_variant`` to record settings. Import heavy libraries inside the methods, cite
the paper or standard in the docstring, and put published constants at module top with their
source. Then add one line ``"name": "module:ClassName"`` to ``REGISTRY`` in ``base.py`` and a
test in ``tests/test_metrics_*.py`` that checks it against an outside reference.
"""
from __future__ import annotations

from .base import DEFAULT_METRICS, REGISTRY, Column, Metric, Prepared, available_metrics
from .build import build_metrics
from .length import DEFAULT_TOLERANCE_HOPS, LENGTH_PARAMS, LengthPolicy

__all__ = ["DEFAULT_METRICS", "DEFAULT_TOLERANCE_HOPS", "LENGTH_PARAMS", "REGISTRY", "Column",
           "Metric", "Prepared", "LengthPolicy", "available_metrics", "build_metrics"]
