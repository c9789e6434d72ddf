"""Metric building blocks: result columns, options, the ``Metric`` base class and the registry.

A metric is split in two so that reference-side work is done once per utterance:
``prepare(reference, sr)`` returns an opaque, picklable state; ``score(state, estimate, sr)``
returns one float per column. Both validate their inputs here, so metric modules only implement
``_prepare`` / ``_score``.
"""
from __future__ import annotations

import importlib
import importlib.util
import math
from abc import ABC, abstractmethod
from dataclasses import asdict, dataclass, field
from importlib import metadata
from typing import Any, ClassVar, Mapping, Sequence

import numpy as np

from ..errors import InputError, MetricUnavailable

INF = math.inf

# name -> "module:Class" inside vocobench.metrics, imported on first use. One line per metric.
REGISTRY: dict[str, str] = {
    "mcd": "cepstral_distance:MelCepstralDistortion",
    "mcd_mfcc": "cepstral_distance:MfccDistortion",
    "pesq_wb": "pesq_scores:PesqWideband",
    "pesq_nb": "pesq_scores:PesqNarrowband",
    "stoi": "intelligibility:Stoi",
    "estoi": "intelligibility:ExtendedStoi",
    "lsd": "spectral_distance:LogSpectralDistance",
    "mrstft": "spectral_distance:MultiResolutionStft",
    "logmel_l1": "spectral_distance:LogMelL1",
    "f0": "pitch_error:PitchError",
    "signal": "signal_checks:SignalChecks",
    "dnsmos": "nonintrusive_mos:Dnsmos",
}

DEFAULT_METRICS: tuple[str, ...] = ("mcd", "pesq_wb", "stoi")
METRICS_EXTRA = "quality"      # the optional extra (pyproject.toml) of metrics that need one

# Config keys named in InputError messages (the [metrics] table of the run config).
NAMES_FIELD = "metrics.use"
OPTIONS_FIELD = "metrics.options"


@dataclass(frozen=True)
class Column:
    """One result column: name, unit, direction (None = neither), range of possible values."""

    name: str
    unit: str
    higher_is_better: bool | None
    valid_range: tuple[float, float]
    description: str

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class Option:
    """A user-settable metric option with its default, accepted type and bounds."""

    default: Any
    kind: str                      # "int", "float", "str", "bool" or "resolutions"
    description: str
    choices: tuple[Any, ...] | None = None
    low: float | None = None       # inclusive bounds for numbers
    high: float | None = None
    nullable: bool = False         # None allowed (means "automatic" / "off")

    def parse(self, value: Any, *, source: str | None, field: str) -> Any:
        def bad(msg: str) -> InputError:
            return InputError(msg, source=source, field=field, value=value)

        if value is None:
            if self.nullable:
                return None
            raise bad("must not be empty")
        if self.kind == "int":
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
                raise bad("must be an integer")
            value = int(value)
        elif self.kind == "float":
            number = (int, float, np.integer, np.floating)
            if isinstance(value, bool) or not isinstance(value, number):
                raise bad("must be a number")
            value = float(value)
            if not math.isfinite(value):
                raise bad("must be finite")
        elif self.kind == "str":
            if not isinstance(value, str):
                raise bad("must be a string")
        elif self.kind == "bool":
            if not isinstance(value, bool):
                raise bad("must be true or false")
        elif self.kind == "resolutions":
            value = _parse_resolutions(value, bad)
        if self.choices is not None and value not in self.choices:
            raise bad("must be one of " + ", ".join(repr(c) for c in self.choices))
        if self.low is not None and value < self.low:
            raise bad(f"must be >= {self.low}")
        if self.high is not None and value > self.high:
            raise bad(f"must be <= {self.high}")
        return value


def _parse_resolutions(value: Any, bad) -> tuple[tuple[int, int, int], ...]:
    """[[n_fft, hop, win], ...] with 0 < hop, 0 < win <= n_fft."""
    try:
        out = tuple(tuple(int(v) for v in r) for r in value)
    except (TypeError, ValueError):
        raise bad("must be a list of [n_fft, hop_length, win_length] triples") from None
    if not out or any(len(r) != 3 or not (0 < r[1] and 0 < r[2] <= r[0]) for r in out):
        raise bad("each resolution must be [n_fft, hop_length, win_length], 0 < win <= n_fft")
    return out


@dataclass
class Prepared:
    """Reference-side state returned by :meth:`Metric.prepare` (picklable)."""

    metric: str
    sample_rate: int
    length: int
    data: Any = None
    unavailable: str | None = None     # reason the reference cannot be scored at all
    reference: np.ndarray | None = field(default=None, repr=False)   # the array itself, no copy
    # states of the reference cut to a shorter length (the "trim" policy), prepared on first use
    trimmed: dict[int, Prepared] = field(default_factory=dict, repr=False)


class Metric(ABC):
    """Base class. Subclasses set ``name``, ``description``, ``options_spec`` and implement
    ``columns``, ``_prepare`` and ``_score``."""

    name: ClassVar[str]
    description: ClassVar[str]
    options_spec: ClassVar[Mapping[str, Option]] = {}
    needs_finite_estimate: ClassVar[bool] = True
    libraries: ClassVar[tuple[str, ...]] = ()     # distributions whose version goes in variant()
    requires: ClassVar[tuple[str, ...]] = ()      # importable modules of an optional extra
    # True: the metric aligns the signals itself (e.g. DTW) and scores an estimate of any length
    # against the whole reference (no cut of the reference under the "trim" policy)
    any_length: ClassVar[bool] = False
    # where a user's metric came from (target, code fingerprint, version); recorded by variant()
    provenance: ClassVar[Mapping[str, Any]] = {}

    def __init__(self, options: Mapping[str, Any] | None = None, *, source: str | None = None):
        options = dict(options or {})
        unknown = sorted(set(options) - set(self.options_spec))
        if unknown:
            valid = ", ".join(sorted(self.options_spec)) or "(none)"
            raise InputError(f"unknown option '{unknown[0]}' for metric '{self.name}'; "
                             f"valid options: {valid}", source=source,
                             field=f"{OPTIONS_FIELD}.{self.name}.{unknown[0]}")
        self.options: dict[str, Any] = {}
        for key, spec in self.options_spec.items():
            raw = options.get(key, spec.default)
            where = f"{OPTIONS_FIELD}.{self.name}.{key}"
            self.options[key] = spec.parse(raw, source=source, field=where)
        self._check_options(source)

    def _check_options(self, source: str | None) -> None:
        """Cross-option checks; raise InputError (see :meth:`_option_error`)."""

    def _option_error(self, key: str, message: str, source: str | None) -> InputError:
        """InputError for option ``key`` of this metric, naming its config field and value."""
        return InputError(message, source=source, field=f"{OPTIONS_FIELD}.{self.name}.{key}",
                          value=self.options.get(key))

    # -- description -------------------------------------------------------------------------
    @property
    @abstractmethod
    def columns(self) -> tuple[Column, ...]:
        ...

    @property
    def sample_rate(self) -> int | None:
        """Rate the metric works at; None = the vocoder's native rate."""
        return None

    def variant(self, sample_rate: int | None = None) -> dict[str, Any]:
        """JSON-able description of the computation; ``sample_rate`` resolves rate-dependent
        settings (frame sizes in samples, warping constant) when given."""
        out: dict[str, Any] = {"metric": self.name, "options": _jsonable(self.options),
                               "columns": [c.name for c in self.columns],
                               "sample_rate": self.sample_rate}
        if self.libraries:
            out["libraries"] = {lib: _version(lib) for lib in self.libraries}
        out.update(_jsonable(self._variant(sample_rate)))
        note = self.caution(sample_rate) if sample_rate else None
        if note:
            out["caution"] = note
        if self.provenance:
            out["provenance"] = _jsonable(dict(self.provenance))
        return out

    def caution(self, sample_rate: int) -> str | None:
        """A warning about using this metric on audio at ``sample_rate`` (None if none)."""
        return None

    def _variant(self, sample_rate: int | None) -> dict[str, Any]:
        return {}

    def describe(self) -> dict[str, Any]:
        """Entry for the ``vocobench metrics`` listing."""
        return {"name": self.name, "description": self.description,
                "sample_rate": self.sample_rate,
                "columns": [c.as_dict() for c in self.columns],
                "options": {k: {"default": _jsonable(o.default), "description": o.description}
                            for k, o in self.options_spec.items()}}

    def __repr__(self) -> str:
        return f"<metric {self.name} {self.options}>"

    # -- computation -------------------------------------------------------------------------
    def prepare(self, reference: np.ndarray, sr: int) -> Prepared:
        """Reference-side analysis, done once per utterance and reused for every estimate."""
        ref = _as_signal(reference, "reference")
        sr = _as_rate(sr)
        state = Prepared(self.name, sr, ref.size, reference=ref)
        if not np.all(np.isfinite(ref)):
            state.unavailable = "reference contains NaN or infinite samples"
            return state
        try:
            state.data = self._prepare(ref, sr)
        except MetricUnavailable as exc:
            state.unavailable = str(exc)
        return state

    def score(self, state: Prepared, estimate: np.ndarray, sr: int) -> dict[str, float]:
        """Score ``estimate`` against the prepared reference. Raises MetricUnavailable.

        An estimate shorter than the prepared reference (the "trim" length policy) is scored
        against the reference cut to its length, prepared once per length and kept on ``state``
        — except by metrics with ``any_length`` (they align the signals themselves and take an
        estimate of any length against the whole reference).
        """
        est = _as_signal(estimate, "estimate")
        sr = _as_rate(sr)
        if not isinstance(state, Prepared) or state.metric != self.name:
            raise ValueError(f"state was not prepared by metric '{self.name}'")
        if sr == state.sample_rate and est.size < state.length and state.reference is not None \
                and not self.any_length:
            cut = state.trimmed.get(est.size)
            if cut is None:
                cut = state.trimmed[est.size] = self.prepare(state.reference[: est.size], sr)
            state = cut
        if sr != state.sample_rate or (est.size != state.length and not self.any_length):
            raise ValueError(f"estimate ({est.size} samples at {sr} Hz) does not match the "
                             f"prepared reference ({state.length} at {state.sample_rate} Hz); "
                             "apply the length policy first")
        if state.unavailable:
            raise MetricUnavailable(state.unavailable)
        if self.needs_finite_estimate and not np.all(np.isfinite(est)):
            raise MetricUnavailable("estimate contains NaN or infinite samples")
        values = dict(self._score(state.data, est, sr))
        names = [c.name for c in self.columns]
        if sorted(values) != sorted(names):
            raise RuntimeError(f"metric '{self.name}' returned {sorted(values)}, expected {names}")
        return {k: float(values[k]) for k in names}

    @abstractmethod
    def _prepare(self, reference: np.ndarray, sr: int) -> Any:
        ...

    @abstractmethod
    def _score(self, data: Any, estimate: np.ndarray, sr: int) -> Mapping[str, float]:
        ...


# -- registry ----------------------------------------------------------------------------------
def metric_class(name: str) -> type[Metric]:
    module, cls = REGISTRY[name].split(":")
    return getattr(importlib.import_module(f"{__package__}.{module}"), cls)


def build_metrics(names: Sequence[str] = DEFAULT_METRICS,
                  options: Mapping[str, Mapping[str, Any]] | None = None,
                  source: str | None = None) -> list[Metric]:
    """Instantiate metrics by registry name, or a user's ``package.module:object`` /
    ``file.py:object`` target (see :mod:`.external`), with per-metric ``options``.

    Raises InputError for an unknown name, an unknown option or a bad option value, a metric
    whose optional extra is not installed, and metric or column names used twice.
    Options for known metrics that are not selected are checked too (typos surface early).
    """
    from .external import check_distinct, is_target, load_metric

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


def missing_requirements(name: str) -> list[str]:
    """Modules of the optional extra that registered metric ``name`` needs and cannot import."""
    return [m for m in metric_class(name).requires if importlib.util.find_spec(m) is None]


def _builtin(name: str, opts: Mapping[str, Any] | None, source: str | None) -> Metric:
    missing = missing_requirements(name)
    if missing:
        raise InputError(f"metric '{name}' needs {', '.join(missing)} (not installed): "
                         f"pip install 'vocobench[{METRICS_EXTRA}]'", source=source,
                         field=NAMES_FIELD, value=name)
    return metric_class(name)(opts, source=source)


def available_metrics() -> list[dict[str, Any]]:
    """Every registered metric with its columns (unit, direction, range), rate and options."""
    return [metric_class(n)().describe() for n in REGISTRY]


# -- helpers -------------------------------------------------------------------------------------
def _as_signal(x: Any, what: str) -> np.ndarray:
    x = np.asarray(x)
    if x.ndim != 1 or x.size == 0 or not np.issubdtype(x.dtype, np.floating):
        raise ValueError(f"{what} must be a non-empty 1-D float array, got {x.dtype} {x.shape}")
    return x


def _as_rate(sr: Any) -> int:
    if isinstance(sr, bool) or not isinstance(sr, (int, np.integer)) or sr <= 0:
        raise ValueError(f"sample rate must be a positive integer, got {sr!r}")
    return int(sr)


def _version(dist: str) -> str:
    try:
        return metadata.version(dist)
    except metadata.PackageNotFoundError:
        return "unknown"


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.generic):
        return obj.item()
    return obj
