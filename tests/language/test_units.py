"""Units on literals: every suffix converted to SI at parse time, with its kind.

The conversions are re-derived here, not copied: 1 min = 60 s, 1 h = 3600 s,
f Hz = 2*pi*f rad/s, d deg = d*pi/180 rad, x dB = 10^(x/20) (an amplitude ratio),
p % = p/100.
"""
from __future__ import annotations

import math

import pytest
from hypothesis import given, settings, strategies as st

from loopwise.language import ast
from loopwise.language.units import UNITS, to_si, unit_kind

from .conftest import parse_error, rhs

# suffix, value written, SI value, kind
TABLE = [
    ("ns", 40, 40e-9, "time"),
    ("us", 150, 150e-6, "time"),
    ("ms", 2.5, 2.5e-3, "time"),
    ("min", 2, 120.0, "time"),
    ("h", 1.5, 5400.0, "time"),
    ("Hz", 50, 2 * math.pi * 50, "frequency"),
    ("kHz", 2, 2 * math.pi * 2000, "frequency"),
    ("deg", 45, math.pi / 4, "angle"),
    ("rad", 0.5, 0.5, "angle"),
    ("dB", 6, 1.9952623149688795, "gain"),  # 10**(6/20)
    ("dB", 20, 10.0, "gain"),
    ("dB", 0, 1.0, "gain"),
    ("%", 20, 0.2, "ratio"),
]


@pytest.mark.parametrize("unit, written, si, kind", TABLE, ids=[f"{w}{u}" for u, w, _, _ in TABLE])
def test_literal_is_converted_to_si(unit, written, si, kind):
    number = rhs(f"x = {written}{unit}")
    assert isinstance(number, ast.Number)
    assert number.value == pytest.approx(si, rel=1e-12)
    assert number.unit == unit and number.text == f"{written}{unit}"
    assert unit_kind(number.unit) == kind


def test_the_table_covers_every_unit():
    assert {row[0] for row in TABLE} == set(UNITS)
    assert set(UNITS) == {"ns", "us", "ms", "min", "h", "Hz", "kHz", "deg", "rad", "dB", "%"}


def test_plain_numbers_are_seconds_and_rad_per_second():
    number = rhs("x = 0.25")
    assert number.value == 0.25 and number.unit is None
    assert unit_kind(None) is None and to_si(3.0, None) == 3.0


@pytest.mark.parametrize("text, si", [
    ("1.5e3us", 1.5e-3), (".5ms", 0.5e-3), ("5.min", 300.0), ("1E-3h", 3.6), ("1e1kHz", 2e4 * math.pi),
])
def test_units_follow_every_number_form(text, si):
    assert rhs(f"x = {text}").value == pytest.approx(si, rel=1e-12)


def test_unit_inside_expressions():
    value = rhs("x = exp(-2min*s)")
    delay = value.arg.left.operand
    assert delay.value == 120.0 and delay.unit == "min"


def test_kilohertz_is_not_read_as_hertz_with_a_prefix_or_k_times_hertz():
    number = rhs("x = 1kHz")
    assert number.unit == "kHz" and number.value == pytest.approx(2000 * math.pi)


def test_minutes_are_not_milli_or_inches():
    assert rhs("x = 1min").value == 60.0
    assert rhs("x = 1ms").value == 1e-3


@pytest.mark.parametrize("text", ["x = 3 ms", "x = 3 deg"])
def test_a_space_before_the_unit_is_an_error(text):
    err, out = parse_error(text)
    assert err.code == "LW102"
    # regression: the hint suggested `3*ms` instead of `3ms`
    assert "`3" + text.split()[-1] + "`" in err.hint, out


@pytest.mark.parametrize("text", ["x = 3S", "x = 3MS", "x = 3hz", "x = 3khz", "x = 3Deg", "x = 3db"])
def test_units_are_case_sensitive(text):
    err, _ = parse_error(text)
    assert err.code in ("LW102", "LW103")


def test_negative_decibels_are_a_negated_literal():
    value = rhs("x = -20dB")
    assert isinstance(value, ast.Neg) and value.operand.value == pytest.approx(10.0)
    assert to_si(-20, "dB") == pytest.approx(0.1)


@given(st.floats(min_value=1e-6, max_value=1e6, allow_nan=False), st.sampled_from(sorted(UNITS)))
@settings(max_examples=100, deadline=None)
def test_written_value_round_trips(value, unit):
    if unit == "dB":
        value = min(value, 6000.0)  # 10**(6000/20) is near the top of the float range
    text = f"{value!r}{unit}"  # repr gives forms like 1e-06 and 6166.0: all valid literals
    number = rhs(f"x = {text}")
    assert number.value == pytest.approx(to_si(value, unit), rel=1e-12)
    assert number.unit == unit


# --- units on requirement limits: the reference's table against the checker ----------

def _metric_table() -> dict[str, set[str]]:
    """metric -> units allowed, read from the table in docs/language.md."""
    import re
    from .conftest import ROOT
    table = {}
    for line in (ROOT / "docs" / "language.md").read_text("utf-8").split("\n"):
        cells = [c.strip() for c in line.replace("\\|", "/").strip().strip("|").split("|")]
        if len(cells) == 4 and re.fullmatch(r"`[a-z_]+`", cells[0]):
            units = set(" ".join(re.findall(r"`([^`]+)`", cells[3])).split())
            table[cells[0].strip("`")] = units
    return table


def test_requirement_units_match_the_reference():
    from loopwise.testing import prepare_text
    from loopwise.errors import ModelError, ModelErrors
    from loopwise.language.requirements import METRICS

    table = _metric_table()
    assert set(table) == set(METRICS)
    base = "input r\ne = r - y\ny = [2/(s*(s + 1))](e)\nbreak b at y\n"
    for metric, allowed in table.items():
        for unit in UNITS:
            text = base + f"require b {metric} >= 2{unit}\n"
            try:
                prepare_text(text, "m.loop")
                accepted = True
            except (ModelError, ModelErrors) as exc:
                errors = exc.errors if isinstance(exc, ModelErrors) else [exc]
                assert [e.code for e in errors] == ["LW241"], (metric, unit, [str(e) for e in errors])
                accepted = False
            assert accepted == (unit in allowed), (metric, unit)
