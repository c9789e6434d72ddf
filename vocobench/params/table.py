"""Parameters and tables: parsing with defaults and rules, dataclass defaults, Markdown docs."""
from __future__ import annotations

import copy
import dataclasses
import operator
import tomllib
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator, Mapping, Sequence

from ..errors import InputError
from ..textfmt import md_table
from .kinds import Constraint, Where, toml_text

REQUIRED: Any = type("Required", (), {"__repr__": lambda self: "REQUIRED"})()


@dataclasses.dataclass(frozen=True)
class Param:
    """One key: name, constraint, default (``REQUIRED``: must be given), description.
    ``None`` is accepted (meaning "unset" or "off") when the default is ``None`` or ``nullable``."""

    name: str
    kind: Constraint
    default: Any = REQUIRED
    doc: str = ""
    nullable: bool = False

    @property
    def required(self) -> bool:
        return self.default is REQUIRED and not isinstance(self.kind, Table)

    def renamed(self, name: str, doc: str | None = None) -> "Param":
        return dataclasses.replace(self, name=name, doc=self.doc if doc is None else doc)

    def default_value(self) -> Any:
        return copy.deepcopy(self.default)

    def parse(self, value: Any, where: Where) -> Any:
        if value is None and (self.nullable or self.default is None):
            return None
        return self.kind.convert(value, where)


_OPS = {"<": operator.lt, "<=": operator.le}
_SYMBOL = {"<": "<", "<=": "≤"}


class Table(Constraint):
    """The keys of one section. ``rules``: ``(key, "<" | "<=", other_key)`` checked after parsing.
    ``entry`` names a key in messages ("key", "option", "section")."""

    type_name = "table"

    def __init__(self, section: str, params: Iterable[Param], *, title: str | None = None,
                 doc: str = "", rules: Sequence[tuple[str, str, str]] = (), entry: str = "key"):
        self.section, self.title, self.doc, self.entry = section, title, doc, entry
        self._params = {p.name: p for p in params}
        self.rules = tuple(rules)

    def __iter__(self) -> Iterator[str]:
        return iter(self._params)

    def __getitem__(self, name: str) -> Param:
        return self._params[name]

    @property
    def params(self) -> list[Param]:
        return list(self._params.values())

    def subset(self, *names: str) -> "Table":
        return Table(self.section, [self[n] for n in names], title=self.title, doc=self.doc,
                     entry=self.entry)

    def default(self, name: str) -> Any:
        return self[name].default_value()

    def field(self, name: str) -> Any:
        """A ``dataclasses.field`` whose default is this table's default for ``name``."""
        d = self[name].default
        if isinstance(d, (list, dict, set)):
            return dataclasses.field(default_factory=lambda: copy.deepcopy(d))
        return dataclasses.field(default=d)

    def describe(self) -> str:
        return "a table"

    def range_text(self) -> str:
        return f"see [{self.section}]"

    def convert(self, value: Any, where: Where) -> dict:
        return self.parse(value, where.source, where=where.field)

    def parse(self, data: Any, source: str | None = None, *, where: str | None = None,
              defaults: bool = True) -> dict[str, Any]:
        """Check ``data`` against the table; returns the parsed values (with defaults unless
        ``defaults=False``). Raises :class:`InputError` naming source, field and value."""
        at = Where(source, self.section if where is None else where)
        if not isinstance(data, Mapping):
            raise at.error("must be a table", data)
        for key in data:
            if key not in self._params:
                valid = ", ".join(self._params) or "none"
                raise at.sub(key).error(f"unknown {self.entry}; valid"
                                        f"{f' in [{at.field}]' if at.field else ''}: {valid}", key)
        out: dict[str, Any] = {}
        for p in self._params.values():
            if p.name in data:
                out[p.name] = p.parse(data[p.name], at.sub(p.name))
            elif p.required:
                raise at.sub(p.name).error(f"missing: {p.doc}")
            elif isinstance(p.kind, Table) and p.default is REQUIRED:
                out[p.name] = p.kind.parse({}, source, where=at.sub(p.name).field,
                                           defaults=defaults)
            elif defaults:
                out[p.name] = p.default_value()
        self.check_rules(out, at)
        return out

    def check_rules(self, values: Mapping[str, Any], at: Where) -> None:
        for left, op, right in self.rules:
            a, b = values.get(left), values.get(right)
            if a is not None and b is not None and not _OPS[op](a, b):
                raise at.sub(left).error(f"must be {_SYMBOL[op]} {right} = {b!r}", a)

    def check(self, name: str, value: Any, source: str | None = None) -> Any:
        """Parse one key's value (field ``section.name``)."""
        return self[name].parse(value, Where(source, self.section).sub(name))

    def apply(self, obj: Any, source: str | None = None, where: str | None = None) -> None:
        """Parse, in place, the fields of dataclass ``obj`` that this table declares
        (works on frozen dataclasses; call it from ``__post_init__``)."""
        at = Where(source, self.section if where is None else where)
        names = {f.name for f in dataclasses.fields(obj)}
        for p in self._params.values():
            if p.name in names:
                object.__setattr__(obj, p.name, p.parse(getattr(obj, p.name), at.sub(p.name)))
        self.check_rules({n: getattr(obj, n) for n in names}, at)

    def markdown(self) -> str:
        """This table (and its sub-tables) as Markdown: key, type, range, default, description."""
        head = self.title or f"`[{self.section}]`"
        rows = list(self._params.values())
        out = [f"### {head}", ""] + ([self.doc, ""] if self.doc else [])
        if rows:
            out.append(md_table(["key", "type", "range", "default", "description"],
                                [[f"`{p.name}`", p.kind.type_name, p.kind.range_text(),
                                  _default_text(p), p.doc] for p in rows]))
        else:
            out += ["No options.", ""]
        if self.rules:
            out += ["Rules: " + "; ".join(f"`{a}` {_SYMBOL[op]} `{b}`"
                                          for a, op, b in self.rules) + ".", ""]
        subs = [p.kind.markdown() for p in self._params.values()
                if isinstance(p.kind, Table) and p.default is REQUIRED]
        return "\n".join(out + subs).rstrip() + "\n"


def with_defaults(*tables: Table) -> Callable[[type], type]:
    """Class decorator (put it under ``@dataclass``): annotated fields without a default that a
    table declares get that table's default, so the default is written only in the table."""
    def wrap(cls: type) -> type:
        for name in cls.__dict__.get("__annotations__", {}):
            if name in cls.__dict__:
                continue
            for t in tables:
                if name in t:
                    setattr(cls, name, t.field(name))
                    break
        return cls
    return wrap


def check(value: Any, kind: Constraint, *, field: str, source: str | None = None) -> Any:
    """Parse one value outside a table (e.g. a command-line flag)."""
    return kind.convert(value, Where(source, field))


def read_toml(path: str | Path, what: str = "config") -> dict[str, Any]:
    """Read a TOML file; a missing, malformed or non-UTF-8 file is an :class:`InputError`."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{what} file not found", source=str(path))
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"malformed TOML: {e}", source=str(path)) from None
    except UnicodeDecodeError:
        raise InputError(f"{what} is not UTF-8 text", source=str(path)) from None


def markdown(tables: Iterable[Table]) -> str:
    """Every table as Markdown, in order (the generated configuration reference)."""
    return "\n".join(t.markdown() for t in tables)


# -- docs formatting -------------------------------------------------------------------------
def _default_text(p: Param) -> str:
    if p.required:
        return "required"
    if p.default is REQUIRED:
        return "—"
    if p.default is None:
        return "unset"
    return f"`{toml_text(p.default)}`"


