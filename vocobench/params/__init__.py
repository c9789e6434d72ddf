"""Declarative parameter tables: one declaration drives parsing, validation, defaults, errors, docs.

The design follows scikit-learn's declarative parameter constraints (each parameter declared once
with the types and intervals it accepts, checked by one shared routine; common practice). Here a
:class:`Param` is a key with its :class:`Constraint`, default and description, and a
:class:`Table` is the set of keys of one config section, option set or policy::

    TIMING = Table("timing", [Param("repeats", Integer(low=1), 3, "timed calls per configuration")])
    TIMING.parse({"repeats": 0}, source="run.toml")
    # InputError: run.toml: field 'timing.repeats': must be a positive integer (got 0)

``Table.parse`` rejects unknown keys (listing the valid ones), converts and checks every value,
fills defaults and applies cross-key rules; :func:`with_defaults` gives a dataclass its field
defaults from tables, so each default is written once; ``Table.markdown`` renders the reference.
``bool`` is never accepted where a number is asked for. Only :mod:`vocobench.errors` is imported.
"""
from __future__ import annotations

from .kinds import (Boolean, Choice, Constraint, Custom, Integer, ListOf, MapOf, OrAuto, OrOff,
                    Real, String, Where, is_integer, is_number)
from .table import REQUIRED, Param, Table, check, markdown, read_toml, with_defaults

__all__ = ["REQUIRED", "Boolean", "Choice", "Constraint", "Custom", "Integer", "ListOf", "MapOf",
           "OrAuto", "OrOff", "Param", "Real", "String", "Table", "Where", "check", "is_integer",
           "is_number", "markdown", "read_toml", "with_defaults"]
