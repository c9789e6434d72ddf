"""Metric building blocks: result columns, the ``Metric`` base class and the registry.

A metric is split in two so that reference-side work is done once per utterance:
``prepare(reference, sr)`` returns an opaque, picklable state; ``score(state, estimate, sr)``
returns one float per column. Both validate their inputs here, so metric modules only implement
``_prepare`` / ``_score``.
"""
from __future__ import annotations

import functools
import importlib
import importlib.util
import math
from abc import ABC, abstractmethod
from dataclasses import asdict, dataclass, field
from importlib import metadata
from typing import Any, ClassVar, Mapping

import numpy as np

from ..errors import MetricUnavailable
from ..params import Custom, Table, is_integer

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


def _resolution_triples(value: Any) -> tuple[tuple[int, int, int], ...]:
    """[[n_fft, hop, win], ...] with 0 < hop, 0 < win <= n_fft."""
    try:
        out = tuple(tuple(int(v) for v in r) for r in value)
    except (TypeError, ValueError):
        raise ValueError("must be a list of [n_fft, hop_length, win_length] triples") from None
    if not out or any(len(r) != 3 or not (0 < r[1] and 0 < r[2] <= r[0]) for r in out):
        raise ValueError("each resolution must be [n_fft, hop_length, win_length], 0 < win <= n_fft")
    return out


RESOLUTIONS = Custom("[[n_fft, hop_length, win_length], ...] with 0 < hop, 0 < win ≤ n_fft",
                     _resolution_triples, "list of triples")


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
    """Base class. Subclasses set ``name``, ``description``, ``options_spec`` (a
    :class:`~vocobench.params.Table` of the options, with cross-option rules) and implement
    ``columns``, ``_prepare`` and ``_score``."""

    name: ClassVar[str]
    description: ClassVar[str]
    options_spec: ClassVar[Table] = Table("", [], entry="option")
    needs_finite_estimate: ClassVar[bool] = True
    libraries: ClassVar[tuple[str, ...]] = ()     # distributions whose version goes in variant()
    requires: ClassVar[tuple[str, ...]] = ()      # importable modules of an optional extra
    # True: the metric aligns the signals itself (e.g. DTW) and scores an estimate of any length
    # against the whole reference (no cut of the reference under the "trim" policy)
    any_length: ClassVar[bool] = False
    # where a user's metric came from (target, code fingerprint, version); recorded by variant()
    provenance: ClassVar[Mapping[str, Any]] = {}

    def __init__(self, options: Mapping[str, Any] | None = None, *, source: str | None = None):
        self.options: dict[str, Any] = self.options_spec.parse(
            options or {}, source, where=f"{OPTIONS_FIELD}.{self.name}")

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
                "options": {p.name: {"default": _jsonable(p.default), "description": p.doc}
                            for p in self.options_spec.params}}

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


def missing_requirements(name: str) -> list[str]:
    """Modules of the optional extra that registered metric ``name`` needs and cannot import."""
    return [m for m in metric_class(name).requires if importlib.util.find_spec(m) is None]


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
    if not is_integer(sr) or sr <= 0:
        raise ValueError(f"sample rate must be a positive integer, got {sr!r}")
    return int(sr)


@functools.lru_cache(maxsize=None)
def _version(dist: str) -> str:
    """Installed version of ``dist``, looked up once per process (importlib.metadata parses the
    package's metadata on every call)."""
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
