"""Declarative parameter tables (vocobench.params) and the generated configuration reference.

The design follows scikit-learn's declarative parameter constraints (sklearn.utils.
_param_validation: a parameter is declared once with the types and intervals it accepts; common
practice). The expected behaviour below is our own contract: unknown keys are errors listing the
valid ones, every error names source file, field and value, ``bool`` is never a number, and each
default is written once, in the table.
"""
from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest

from vocobench import docs
from vocobench.errors import InputError
from vocobench.params import (REQUIRED, Boolean, Choice, Integer, ListOf, MapOf, OrOff, Param,
                              Real, String, Table, check, is_integer, is_number, with_defaults)

ROOT = Path(__file__).resolve().parents[1]

T = Table("demo", [
    Param("n", Integer(low=1), 3, "a count"),
    Param("x", Real(0.5, 1, closed="left"), 0.95, "a level"),
    Param("mode", Choice(("trim", "pad")), "trim", "a mode"),
    Param("steps", ListOf(Integer(low=1), distinct=True), [1, 2], "step counts"),
    Param("name", String(nonempty=True), None, "a label"),
    Param("path", String(), doc="where it is"),
])
BAND = Table("band", [Param("fmin", Real(low=0), 50.0, "low edge"),
                      Param("fmax", Real(low=0), 600.0, "high edge")], rules=[("fmin", "<", "fmax")])


def _error(data, table=T) -> InputError:
    with pytest.raises(InputError) as e:
        table.parse(data, source="cfg.toml")
    assert "cfg.toml" in str(e.value)                 # names the file
    return e.value


def test_defaults_filled_and_written_once():
    got = T.parse({"path": "p", "n": 1, "x": 0.99})
    assert got == {"n": 1, "x": 0.99, "mode": "trim", "steps": [1, 2], "name": None, "path": "p"}
    assert T.parse({"path": "p", "x": 0.99}, defaults=False) == {"path": "p", "x": 0.99}
    a, b = T.parse({"path": "p", "x": 0.99}), T.parse({"path": "p", "x": 0.99})
    a["steps"].append(9)                              # a mutable default is never shared
    assert b["steps"] == [1, 2] and T["steps"].default == [1, 2]


def test_unknown_key_lists_the_valid_ones():
    e = _error({"path": "p", "stpes": [1]})
    assert e.field == "demo.stpes" and e.value == "stpes"
    for key in T:
        assert key in str(e)


def test_missing_required_key():
    e = _error({})
    assert e.field == "demo.path" and "missing" in str(e) and "where it is" in str(e)


@pytest.mark.parametrize("key, value", [
    ("n", True), ("n", 0), ("n", 2.0), ("n", "3"),
    ("x", True), ("x", 1.0), ("x", 0.49), ("x", math.nan), ("x", math.inf), ("x", "0.9"),
    ("mode", "stretch"), ("mode", 1),
    ("steps", []), ("steps", 4), ("steps", [1, 1]), ("steps", [1, False]), ("steps", [0]),
    ("name", ""), ("name", 3),
])
def test_bad_values_name_field_and_value(key, value):
    e = _error({"path": "p", key: value})
    assert e.field == f"demo.{key}"
    assert "got" in str(e)                            # the value is shown


def test_bool_is_never_a_number():
    assert not is_integer(True) and not is_number(False)
    assert is_integer(np.int64(3)) and is_number(np.float32(0.5)) and not is_integer(2.0)
    with pytest.raises(InputError):
        check(True, Integer(), field="--repeats")
    with pytest.raises(InputError):
        check(False, Real(), field="--confidence")
    assert check(np.int64(4), Integer(low=2), field="n") == 4


def test_interval_bounds_open_and_closed():
    assert Real(0, 1, closed="neither").describe() == "a finite number in (0, 1)"
    assert Real(low=0, closed="neither").describe() == "a finite number > 0"
    assert Integer(low=1).describe() == "a positive integer"
    assert Integer(1, 60).describe() == "an integer in [1, 60]"
    for v, ok in ((0.0, False), (1e-9, True), (1.0, False)):
        try:
            check(v, Real(0, 1, closed="neither"), field="b")
            assert ok
        except InputError:
            assert not ok
    assert check(2, Real(keep_int=True), field="t") == 2 and type(check(2, Real(), field="t")) is float


def test_rules_lists_maps_and_off_values():
    e = _error({"fmin": 700.0}, BAND)                 # rule fmin < fmax
    assert e.field == "band.fmin" and e.value == 700.0 and "< fmax" in str(e)
    assert BAND.parse({"fmin": 70}) == {"fmin": 70.0, "fmax": 600.0}
    names = ListOf(String(nonempty=True), split=",", as_tuple=True)
    assert check("a, b", names, field="m") == ("a", "b")
    with pytest.raises(InputError) as e:
        check({"pesq": -1}, MapOf(Real(low=0)), field="margins")
    assert e.value.field == "margins.pesq"
    budget = OrOff(Real(low=0, closed="neither"))
    assert check(False, budget, field="r") is None and check("none", budget, field="r") is None
    assert check(1.5, budget, field="r") == 1.5
    with pytest.raises(InputError):
        check("yes", Boolean(), field="plots")


def test_dataclass_defaults_come_from_the_table():
    @dataclasses.dataclass(frozen=True)
    @with_defaults(T)
    class Opts:
        n: int
        x: float
        mode: str

        def __post_init__(self):
            T.apply(self, "api")

    assert Opts() == Opts(n=3, x=0.95, mode="trim")
    with pytest.raises(InputError) as e:
        Opts(mode="stretch")
    assert e.value.field == "demo.mode" and e.value.source == "api"


def test_declared_tables_share_one_bootstrap_declaration():
    from vocobench.config import RUN, TIMING, RunConfig, TimingConfig
    from vocobench.gate.policy import POLICY, POLICY_BOOTSTRAP, Policy
    from vocobench.report.options import DECIDE, ReportOptions
    from vocobench.stats import BOOTSTRAP, BootstrapSettings

    assert DECIDE["confidence"] is BOOTSTRAP["confidence"] is POLICY["confidence"]
    assert DECIDE["resamples"].kind is BOOTSTRAP["n_resamples"].kind
    assert POLICY_BOOTSTRAP["method"] is BOOTSTRAP["method"]
    s, p, o = BootstrapSettings(), Policy(), ReportOptions()
    assert s.n_resamples == p.n_resamples == o.resamples == BOOTSTRAP["n_resamples"].default
    assert TimingConfig().repeats == TIMING["repeats"].default
    assert RunConfig("a:b", Path("t"), []).workers == RUN["workers"].default
    for table in docs.parameter_tables():          # every declared key has a description
        for p in table.params:
            assert p.doc, (table.section, p.name)
            assert p.default is not REQUIRED or p.required or isinstance(p.kind, Table)


def test_developers_md_reference_is_up_to_date():
    # Regenerate with: python -m vocobench.docs DEVELOPERS.md
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    assert docs.with_reference(text) == text, "run: python -m vocobench.docs DEVELOPERS.md"
    assert "| `length_tolerance_hops` | number | ≥ 0 | `2.0` |" in text
