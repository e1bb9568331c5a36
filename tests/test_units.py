"""Quantity parsing at the edge: reference values, the revolution trap, and hostile strings."""

import math
import time

import pytest
from hypothesis import given
from hypothesis import strategies as st

from engine.errors import InputError
from engine.units import (
    MAX_QUANTITY_LENGTH,
    parse_quantity,
    parse_speed,
    parse_tolerance,
    to_display,
    unit_conversion,
    ureg,
)


def test_inch_is_exact():
    # International yard and pound agreement (1959): 1 in = 0.0254 m exactly.
    assert parse_quantity("18 in", "length", "diameter") == pytest.approx(18 * 0.0254, rel=1e-15)
    assert parse_quantity("1 ft", "length", "x") == pytest.approx(12 * 0.0254, rel=1e-15)


@pytest.mark.parametrize(
    ("text", "expected_rev_s"),
    [
        ("300 rpm", 5.0),  # 300 revolutions / 60 s (definition of the minute)
        ("5 rev/s", 5.0),
        ("5 Hz", 5.0),  # a rate with no angle counts revolutions
        ("300 1/min", 5.0),
        ("360 deg/s", 1.0),  # 360 degrees make one revolution
        ("6.283185307179586 rad/s", 1.0),  # 2*pi radians make one revolution
        ("120 RPM", 2.0),  # capitals as written on tachometers
    ],
)
def test_rotation_rates_are_revolutions_per_second(text, expected_rev_s):
    assert parse_quantity(text, "rotation_rate", "speed") == pytest.approx(expected_rev_s)


def test_the_pint_revolution_trap_is_avoided():
    # pint itself converts 300 rpm to 2*pi*5 Hz because it counts a revolution as 2*pi radians.
    assert ureg.Quantity(300, "rpm").to("Hz").magnitude == pytest.approx(10 * math.pi)
    assert parse_quantity("300 rpm", "rotation_rate", "speed") == pytest.approx(5.0)


@pytest.mark.parametrize(
    ("text", "kind", "expected"),
    [
        ("20 degC", "temperature", 293.15),  # 0 degC = 273.15 K (SI Brochure, 9th ed.)
        ("20 °C", "temperature", 293.15),
        ("68 degF", "temperature", 293.15),  # (68 - 32) * 5/9 + 273.15
        ("84.6 kPa", "pressure", 84_600.0),
        ("1013 hPa", "pressure", 101_300.0),
        ("3 MV/m", "electric_field", 3.0e6),
        ("30 kV/cm", "electric_field", 3.0e6),  # 30e3 V / 0.01 m
        ("12 uA", "current", 12e-6),
        ("12 µA", "current", 12e-6),  # micro sign U+00B5
        ("12 μA", "current", 12e-6),  # Greek small mu U+03BC
        ("2 %", "fraction", 0.02),
        ("0.55", "fraction", 0.55),
        ("21,5 cm", "length", 0.215),  # decimal comma
        ("0.12 m^2", "area", 0.12),
        ("1200 cm**2", "area", 0.12),
        ("6 m/s", "linear_speed", 6.0),
        ("5 min", "duration", 300.0),
    ],
)
def test_quantities_in_si(text, kind, expected):
    assert parse_quantity(text, kind, "field") == pytest.approx(expected, rel=1e-12)


def test_speed_kind_follows_the_unit():
    assert parse_speed("6 m/s") == (6.0, "linear")
    assert parse_speed("300 rpm") == (pytest.approx(5.0), "rotation")
    with pytest.raises(InputError, match="rotation rate .* or a linear speed"):
        parse_speed("3 kg")


def test_unit_conversion_scale_and_offset():
    scale, offset = unit_conversion("degF", "temperature")
    assert scale == pytest.approx(5 / 9)
    assert 32 * scale + offset == pytest.approx(273.15)  # 32 degF is the ice point
    assert unit_conversion("rpm", "rotation_rate") == (pytest.approx(1 / 60), 0.0)


def test_display_round_trip():
    assert to_display(5.0, "rotation_rate", "rpm") == pytest.approx(300.0)
    assert to_display(293.15, "temperature", "degC") == pytest.approx(20.0)


def test_tolerances():
    assert parse_tolerance("2 %", "length", "t").relative
    assert parse_tolerance("2 %", "length", "t").value == pytest.approx(0.02)
    absolute = parse_tolerance("1 mm", "length", "t")
    assert (absolute.relative, absolute.value) == (False, pytest.approx(0.001))
    assert parse_tolerance("3 rpm", "rotation_rate", "t").value == pytest.approx(0.05)
    with pytest.raises(InputError, match="negative"):
        parse_tolerance("-1 mm", "length", "t")


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("20 kg", r"outer radius needs a length, e.g. '46 cm', got '20 kg'"),
        ("46", "needs a length with a unit"),
        ("cm", "not a quantity"),
        ("46 furlongs per fortnight", "needs a length"),
        ("46 blorbs", "not a unit this tool knows"),
        ("10**10**10 m", "number or a power where a unit belongs"),
        ("1 m**999", "number or a power where a unit belongs"),
        ("2 m^2", "needs a length"),
        ("1e999 m", "too large"),
        ("x" * (MAX_QUANTITY_LENGTH + 1), "characters long"),
        ("__import__('os') m", "not a quantity"),
        ("1 m; drop", "not a unit"),
    ],
)
def test_bad_quantities_say_what_was_expected(text, message):
    with pytest.raises(InputError, match=message):
        parse_quantity(text, "length", "outer radius")


def test_non_text_values_are_refused_with_a_message():
    with pytest.raises(InputError, match="expected a quantity with a unit"):
        parse_quantity(46, "length", "outer radius")
    with pytest.raises(InputError, match="expected a quantity with a unit"):
        parse_quantity(None, "length", "outer radius")


def test_hostile_strings_are_refused_quickly():
    start = time.perf_counter()
    for text in ["9" * 10_000 + " m", "1 " + "m*" * 5000, "10**10**10**10 m", "(" * 60 + "m"]:
        with pytest.raises(InputError):
            parse_quantity(text, "length", "x")
    assert time.perf_counter() - start < 1.0


@given(st.text(max_size=80))
def test_any_text_gives_a_float_or_an_input_error(text):
    try:
        value = parse_quantity(text, "length", "x")
    except InputError:
        return
    assert isinstance(value, float)
