"""Constraint kinds of parameter tables: what a value must be, how it is parsed and described.

``bool`` is never accepted where a number is asked for (it is an ``int`` subclass in Python).
"""
from __future__ import annotations

import dataclasses
import math
from numbers import Integral
from numbers import Real as _RealNumber
from typing import Any, Callable, Mapping

from ..errors import InputError

def is_integer(value: Any) -> bool:
    """An integer (``int`` or NumPy integer), never ``bool``."""
    return isinstance(value, Integral) and not isinstance(value, bool)


def is_number(value: Any) -> bool:
    """A real number (``int``, ``float`` or NumPy scalar), never ``bool``; may be non-finite."""
    return isinstance(value, _RealNumber) and not isinstance(value, bool)


@dataclasses.dataclass(frozen=True)
class Where:
    """Where a value came from: the source (file) and the dotted field name."""

    source: str | None = None
    field: str = ""

    def sub(self, key: Any) -> "Where":
        return Where(self.source, f"{self.field}.{key}" if self.field else str(key))

    def error(self, message: str, value: Any = None) -> InputError:
        return InputError(message, source=self.source, field=self.field or None, value=value)


class Constraint:
    """What a value must be. ``convert`` returns the parsed value or raises ``where.error``."""

    type_name = "value"

    def describe(self) -> str:          # completes "must be ..."
        return "a valid value"

    def range_text(self) -> str:         # the "range" column of the docs
        return ""

    def convert(self, value: Any, where: Where) -> Any:
        raise NotImplementedError

    def fail(self, value: Any, where: Where) -> InputError:
        return where.error(f"must be {self.describe()}", value)


@dataclasses.dataclass(frozen=True)
class _Interval(Constraint):
    low: float | None = None
    high: float | None = None
    closed: str = "both"                # which bounds are included: both, left, right, neither

    def range_text(self) -> str:
        lo_in, hi_in = self.closed in ("both", "left"), self.closed in ("both", "right")
        lo, hi = self.low, self.high
        if lo is not None and hi is not None:
            return f"{'[' if lo_in else '('}{lo:g}, {hi:g}{']' if hi_in else ')'}"
        if lo is not None:
            return f"{'≥' if lo_in else '>'} {lo:g}"
        return f"{'≤' if hi_in else '<'} {hi:g}" if hi is not None else ""

    def describe(self) -> str:
        rng = self.range_text()
        return self.noun + (f" in {rng}" if rng[:1] in "[(" else f" {rng}" if rng else "")

    def inside(self, v: float) -> bool:
        lo_in, hi_in = self.closed in ("both", "left"), self.closed in ("both", "right")
        return ((self.low is None or (v >= self.low if lo_in else v > self.low))
                and (self.high is None or (v <= self.high if hi_in else v < self.high)))


@dataclasses.dataclass(frozen=True)
class Integer(_Interval):
    """An integer (never ``bool``) in ``[low, high]``; returned as ``int``."""

    type_name, noun = "integer", "an integer"

    def describe(self) -> str:
        if self.high is None and self.low in (0, 1):
            return "a positive integer" if self.low == 1 else "a non-negative integer"
        return super().describe()

    def convert(self, value: Any, where: Where) -> int:
        if not is_integer(value) or not self.inside(value):
            raise self.fail(value, where)
        return int(value)


@dataclasses.dataclass(frozen=True)
class Real(_Interval):
    """A finite real number (never ``bool``) within the bounds, returned as ``float`` (a Python
    ``int`` stays as given with ``keep_int``, so recorded configs keep their literal form)."""

    keep_int: bool = False
    type_name, noun = "number", "a finite number"

    def convert(self, value: Any, where: Where) -> float:
        if not is_number(value) or not math.isfinite(value) or not self.inside(value):
            raise self.fail(value, where)
        return value if self.keep_int and type(value) in (int, float) else float(value)


@dataclasses.dataclass(frozen=True)
class Choice(Constraint):
    """One of the given values (compared by type and value, so ``True`` is not ``1``)."""

    options: tuple[Any, ...]

    @property
    def type_name(self) -> str:         # type: ignore[override]
        return _type_word(self.options[0])

    def describe(self) -> str:
        return "one of " + ", ".join(repr(o) for o in self.options)

    def range_text(self) -> str:
        return ", ".join(toml_text(o) for o in self.options)

    def convert(self, value: Any, where: Where) -> Any:
        if not any(type(value) is type(o) and value == o for o in self.options):
            raise self.fail(value, where)
        return value


@dataclasses.dataclass(frozen=True)
class String(Constraint):
    nonempty: bool = False
    type_name = "string"

    def describe(self) -> str:
        return "a non-empty string" if self.nonempty else "a string"

    def range_text(self) -> str:
        return "non-empty" if self.nonempty else ""

    def convert(self, value: Any, where: Where) -> str:
        if not isinstance(value, str) or (self.nonempty and not value):
            raise self.fail(value, where)
        return value


class Boolean(Constraint):
    type_name = "boolean"

    def describe(self) -> str:
        return "true or false"

    def convert(self, value: Any, where: Where) -> bool:
        if not isinstance(value, bool):
            raise self.fail(value, where)
        return value


@dataclasses.dataclass(frozen=True)
class ListOf(Constraint):
    """A list (or tuple) of items, each meeting ``item``; a string is split at ``split`` if set."""

    item: Constraint
    nonempty: bool = True
    distinct: bool = False
    split: str | None = None
    as_tuple: bool = False

    @property
    def type_name(self) -> str:         # type: ignore[override]
        return f"list of {self.item.type_name}"

    def describe(self) -> str:
        return f"a {'non-empty ' if self.nonempty else ''}list; each item {self.item.describe()}"

    def range_text(self) -> str:
        item = self.item.range_text()
        parts = (["at least one item"] if self.nonempty else []) + ([f"each {item}"] if item else [])
        return ", ".join(parts + (["distinct"] if self.distinct else []))

    def convert(self, value: Any, where: Where) -> list | tuple:
        if self.split and isinstance(value, str):
            value = [s.strip() for s in value.split(self.split) if s.strip()]
        if not isinstance(value, (list, tuple)) or (self.nonempty and not value):
            raise self.fail(value, where)
        out = []
        for v in value:
            try:
                out.append(self.item.convert(v, where))
            except InputError:
                raise where.error(f"every item must be {self.item.describe()}", v) from None
        if self.distinct and len(set(map(repr, out))) != len(out):
            raise where.error("items repeat; each must be distinct", list(value))
        return tuple(out) if self.as_tuple else out


@dataclasses.dataclass(frozen=True)
class MapOf(Constraint):
    """A table of ``name = value`` with free names; ``value=None`` leaves the values as given."""

    value: Constraint | None = None
    what: str = "a table of name = value"
    type_name = "table"

    def describe(self) -> str:
        return self.what

    def range_text(self) -> str:
        if self.value is None:
            return "free-form"
        rng = self.value.range_text()
        return f"values: {self.value.type_name}" + (f", {rng}" if rng else "")

    def convert(self, value: Any, where: Where) -> dict:
        if not isinstance(value, Mapping):
            raise self.fail(value, where)
        if self.value is None:
            return dict(value)
        return {str(k): self.value.convert(v, where.sub(k)) for k, v in value.items()}


@dataclasses.dataclass(frozen=True)
class _OrWord(Constraint):
    """``inner``, or a word with a meaning of its own (:meth:`word` says which value it gives)."""

    inner: Constraint
    also = ""                           # completes "<inner type> or ..." in the docs

    @property
    def type_name(self) -> str:         # type: ignore[override]
        return f"{self.inner.type_name} or {self.also.split(' for ')[0]}"

    def describe(self) -> str:
        return f"{self.inner.describe()}, or {self.also}"

    def range_text(self) -> str:
        return self.inner.range_text()

    def word(self, value: Any) -> tuple[bool, Any]:
        raise NotImplementedError

    def convert(self, value: Any, where: Where) -> Any:
        is_word, parsed = self.word(value)
        if is_word:
            return parsed
        try:
            return self.inner.convert(value, where)
        except InputError:
            raise self.fail(value, where) from None


@dataclasses.dataclass(frozen=True)
class OrOff(_OrWord):
    """``inner``, or ``false`` / ``"none"`` meaning "off" (parsed as ``None``)."""

    also = "false for none"

    def word(self, value: Any) -> tuple[bool, Any]:
        off = value is None or value is False or (isinstance(value, str) and value.lower() == "none")
        return off, None


@dataclasses.dataclass(frozen=True)
class OrAuto(_OrWord):
    """``inner``, or the word ``"auto"`` (kept as the string ``"auto"``): the program decides."""

    also = '"auto"'

    def word(self, value: Any) -> tuple[bool, Any]:
        return isinstance(value, str) and value.lower() == "auto", "auto"


@dataclasses.dataclass(frozen=True)
class Custom(Constraint):
    """A value parsed by ``parse(value)``; a ``ValueError`` becomes the error message."""

    text: str                           # completes "must be ..." and fills the range column
    parse: Callable[[Any], Any]
    type_name: str = "value"            # type: ignore[misc]

    def describe(self) -> str:
        return self.text

    def range_text(self) -> str:
        return self.text

    def convert(self, value: Any, where: Where) -> Any:
        try:
            return self.parse(value)
        except (TypeError, ValueError) as e:
            raise where.error(str(e) or f"must be {self.text}", value) from None


def _type_word(v: Any) -> str:
    return {bool: "boolean", int: "integer", float: "number", str: "string"}.get(type(v), "value")


def toml_text(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return f'"{v}"'
    if isinstance(v, Mapping):
        return "{" + ", ".join(f"{k} = {toml_text(x)}" for k, x in v.items()) + "}"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(toml_text(x) for x in v) + "]"
    return repr(v)
