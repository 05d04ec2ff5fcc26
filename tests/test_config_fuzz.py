"""Fuzz the rig config: mutated shipped configs never crash it and never let a number out of its range.

Each case takes a shipped config as data (5,000 cases for each of the two,
10,000 in all), applies one to three mutations
(delete a key or a section, swap a value's type, an extreme number, a value at
or just past one of the field's own bounds, NaN and infinity as numbers and as
strings, deep nesting, unknown keys, huge strings and integers, a file cut
short) and hands the TOML text to :func:`daemon.config.parse_config`, the path
a file takes. A refused config must give a :class:`ConfigError` whose problems
are single short lines naming a field path; an accepted one must hold every
number inside the bounds its model declares, of its declared type, finite and
normal, and map onto the plant model. The run is derandomised, so CI repeats it.
"""

from __future__ import annotations

import copy
import datetime
import math
import sys
from collections import Counter

import pytest
from annotated_types import Ge, Gt, Le, Lt
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from pydantic import BaseModel
from pydantic.fields import FieldInfo
from test_config_support import KESTREL, WREN, RawToml, config_dict, toml_text

from daemon.config import ConfigError, PoiseConfig, parse_config
from daemon.config.plant import plant_params
from daemon.config.problems import SHOWN_CHARS

CASES_PER_CONFIG = 5_000  # two shipped configs: 10,000 cases, on both cores of a CI machine under xdist
LONGEST_PROBLEM_CHARS = 400  # far above any real problem line, far below an echoed huge value

BASES = {"kestrel-1": config_dict(KESTREL), "wren-2": config_dict(WREN)}
SECTIONS: dict[str, type[BaseModel]] = {
    name: field.annotation for name, field in PoiseConfig.model_fields.items()
}
FIELD_PATHS = [(section, name) for section, model in SECTIONS.items() for name in model.model_fields]

HUGE = "x" * 10_000  # as good as 100,000 for the cut (tests/test_config.py has one), and 10 times faster
EXTREME_NUMBERS = [
    0, -1, 1, 3, 2**31, 2**63 - 1, -(2**63), 10**30,
    0.0, -0.0, 0.5, 1.0, 5e-324, 1e-320, sys.float_info.min, 1e-300, 1e-9,
    1e300, sys.float_info.max, -1e300, math.nan, math.inf, -math.inf,
]
NUMBER_STRINGS = ["nan", "inf", "-inf", "NaN", "1e309", "0.5", "1", "true", "", " 1", HUGE]
OTHER_VALUES = [
    True, False, [], {}, [1.0, 2.0, 3.0, 4.0], [True, 0, "1"], {"a": 1},
    datetime.datetime(2024, 1, 2, 3, 4, 5), datetime.date(2024, 1, 2),
]
NESTED = [RawToml("[" * n + "]" * n) for n in (2, 40, 300, 5000)] + [
    RawToml("{a = " * n + "1" + "}" * n) for n in (20, 2000)
]
TOO_LONG_INTEGERS = [RawToml("9" * 5000), RawToml("-" + "1" * 4301)]
UNKNOWN_KEYS = ["bogus", "Length_m", "length-m", "längd", "rate hz", "k" * 10_000]
SCALES = [-1.0, 0.0, 1e-12, 1e-3, 0.5, 0.999999, 1.000001, 2.0, 1e3, 1e12]

KINDS = ["delete", "delete section", "value", "near bound", "scale", "nest", "unknown key", "unknown section",
         "section value"]
MUTATIONS = [(kind, section, key) for kind in KINDS for section, key in FIELD_PATHS]  # one draw, not two
values = st.sampled_from(EXTREME_NUMBERS + NUMBER_STRINGS + OTHER_VALUES + NESTED + TOO_LONG_INTEGERS)


def bounds(field: FieldInfo) -> list[object]:
    return [item for item in field.metadata if isinstance(item, Gt | Ge | Lt | Le)]


def within(value: float, limits: list[object]) -> bool:
    checks = {
        Gt: lambda bound: value > bound.gt,
        Ge: lambda bound: value >= bound.ge,
        Lt: lambda bound: value < bound.lt,
        Le: lambda bound: value <= bound.le,
    }
    return all(checks[type(bound)](bound) for bound in limits)


def near_bounds(field: FieldInfo) -> list[float | int]:
    """Each bound, and the numbers just inside and just outside it."""
    near: list[float | int] = []
    for bound in bounds(field):
        edge = next(getattr(bound, name) for name in ("gt", "ge", "lt", "le") if hasattr(bound, name))
        if field.annotation is int:
            near += [edge - 1, edge, edge + 1]
        else:
            near += [math.nextafter(edge, -math.inf), float(edge), math.nextafter(edge, math.inf)]
    return near


@st.composite
def mutated_configs(draw: st.DrawFn, base: dict) -> tuple[dict, str]:
    doc = copy.deepcopy(base)
    for _ in range(draw(st.integers(1, 3))):
        kind, section, key = draw(st.sampled_from(MUTATIONS))
        table = doc.get(section)
        if kind == "delete section":
            doc.pop(section, None)
            continue
        if kind == "unknown section":
            doc[draw(st.sampled_from(UNKNOWN_KEYS))] = {"x": draw(values)}
            continue
        if kind == "section value":
            doc[section] = draw(values)
            continue
        if not isinstance(table, dict):
            continue
        field = SECTIONS[section].model_fields[key]
        if kind == "delete":
            table.pop(key, None)
        elif kind == "value":
            table[key] = draw(values)
        elif kind == "near bound" and bounds(field):
            table[key] = draw(st.sampled_from(near_bounds(field)))
        elif kind == "scale" and isinstance(table.get(key), int | float) and not isinstance(table[key], bool):
            table[key] = table[key] * draw(st.sampled_from(SCALES))
        elif kind == "nest" and key in table:
            table[key] = [table[key]] if draw(st.booleans()) else [[table[key]]]
        elif kind == "unknown key":
            table[draw(st.sampled_from(UNKNOWN_KEYS))] = draw(values)
    text = toml_text(doc)
    if draw(st.integers(0, 19)) == 0:  # now and then a file cut short
        text = text[: draw(st.integers(0, len(text)))]
    return doc, text


def assert_one_line_problems_naming_a_path(error: ConfigError, doc: dict) -> None:
    assert error.problems
    keys = set(SECTIONS) | {key[:SHOWN_CHARS] for key in doc}
    for problem in error.problems:
        assert "\n" not in problem and "\r" not in problem, problem[:200]
        assert len(problem) <= LONGEST_PROBLEM_CHARS, problem[:200]
        head, sep, what = problem.partition(": ")
        assert sep and what.strip(), problem
        if head in ("not valid TOML", "not readable TOML"):
            continue
        first = head.split(".")[0]
        assert any(first == key or (first.startswith(key) and "…" in first) for key in keys), problem


def assert_every_number_declared_and_in_range(config: PoiseConfig) -> None:
    for section_name, model in SECTIONS.items():
        section = getattr(config, section_name)
        for name, field in model.model_fields.items():
            value = getattr(section, name)
            where = f"{section_name}.{name} = {value!r}"
            if field.annotation in (int, float):
                assert type(value) is field.annotation, where
            items = value if isinstance(value, tuple) else (value,)
            for item in items:
                if isinstance(item, bool) or not isinstance(item, int | float):
                    continue
                assert math.isfinite(item) and not 0 < abs(item) < sys.float_info.min, where
                assert within(item, bounds(field)), where
    plant_params(config)


@pytest.mark.parametrize("rig", sorted(BASES))
def test_mutated_configs_give_one_line_problems_or_numbers_in_range(rig):
    seen: Counter[str] = Counter()

    @settings(
        max_examples=CASES_PER_CONFIG, derandomize=True, deadline=None, database=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    )
    @given(mutated_configs(BASES[rig]))
    def check(case: tuple[dict, str]) -> None:
        doc, text = case
        seen["cases"] += 1
        try:
            config = parse_config(text, "fuzz.toml")
        except ConfigError as error:
            seen["refused"] += 1
            assert_one_line_problems_naming_a_path(error, doc)
            return
        seen["accepted"] += 1
        assert_every_number_declared_and_in_range(config)

    check()
    assert seen["cases"] >= CASES_PER_CONFIG
    assert seen["accepted"] > CASES_PER_CONFIG // 20 and seen["refused"] > CASES_PER_CONFIG // 2, seen
