"""Keys shared by every stage: the configuration key and the direction of a metric column.

A configuration of a sweep is ``(schedule, sampler, steps)``; its label
``"schedule/sampler/steps"`` names it in items, reports, gate outputs and on the command line.
A metric column is *directed* when its ``higher_is_better`` is a boolean; a column whose
``higher_is_better`` is anything else (``None`` for a frame count, say) is informational and is
never compared, summarised as a quality or named in a decision.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Iterable, Mapping

import pandas as pd

from .errors import InputError

CONFIG_KEYS = ("schedule", "sampler", "steps")


@dataclass(frozen=True)
class ConfigKey:
    """One configuration of a sweep: ``(schedule, sampler, steps)``."""

    schedule: str
    sampler: str
    steps: int

    @property
    def label(self) -> str:
        return config_label(self.schedule, self.sampler, self.steps)

    def __str__(self) -> str:
        return self.label

    @classmethod
    def parse(cls, text: str, source: str | None = None, field: str = "reference") -> "ConfigKey":
        """Parse ``"schedule/sampler/steps"`` (the label form); ``source`` and ``field`` name
        the input in the :class:`~vocobench.errors.InputError` raised for a malformed label."""
        parts = str(text).rsplit("/", 2)
        if len(parts) != 3 or not parts[0] or not parts[1]:
            raise InputError("expected a configuration as schedule/sampler/steps", source=source,
                             field=field, value=text)
        try:
            steps = int(parts[2])
        except ValueError:
            raise InputError("steps of a configuration must be an integer", source=source,
                             field=field, value=text) from None
        return cls(parts[0], parts[1], steps)

    @classmethod
    def of(cls, row: Mapping[str, Any]) -> "ConfigKey":
        """The key of a mapping with ``schedule``, ``sampler`` and ``steps`` (a grid entry, an
        item); raises ``KeyError``, ``TypeError`` or ``ValueError`` for a malformed one."""
        return cls(str(row["schedule"]), str(row["sampler"]), int(row["steps"]))


def config_label(schedule: Any, sampler: Any, steps: Any) -> str:
    """``"schedule/sampler/steps"``, the label of :class:`ConfigKey`."""
    return f"{schedule}/{sampler}/{int(steps)}"


def labels(frame: pd.DataFrame) -> pd.Series:
    """The label of every row of a frame with ``schedule``, ``sampler`` and ``steps`` columns."""
    return (frame["schedule"].astype(str) + "/" + frame["sampler"].astype(str) + "/"
            + frame["steps"].astype(int).astype(str))


# ---------------------------------------------------------------- column direction

def direction(spec: Any) -> bool | None:
    """``higher_is_better`` of a column spec (a mapping, or an object with that attribute) when
    it is a boolean, else ``None`` (an informational column)."""
    hib = spec.get("higher_is_better") if isinstance(spec, Mapping) else \
        getattr(spec, "higher_is_better", None)
    return hib if isinstance(hib, bool) else None


def is_directed(spec: Any) -> bool:
    """Whether a column spec has a boolean ``higher_is_better`` (see :func:`direction`)."""
    return direction(spec) is not None


def directed_columns(columns: Mapping[str, Any] | Iterable[Any]) -> list[str]:
    """Names of the directed columns, in order: of a ``{name: spec}`` mapping (a manifest's
    ``columns``), or of objects with ``name`` and ``higher_is_better`` attributes."""
    if isinstance(columns, Mapping):
        return [name for name, spec in columns.items() if is_directed(spec)]
    return [c.name for c in columns if is_directed(c)]
