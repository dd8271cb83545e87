"""Unit conversion at the scenario boundary, against the definitions of the units."""

from __future__ import annotations

import math

import pytest

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.units import (
    DISPLAY_UNITS,
    format_quantity,
    parse_quantity,
    parse_tolerance,
    parse_tolerance_text,
    ureg,
)


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("8 mW", "W", 8e-3),  # SI prefix milli = 1e-3 (BIPM SI Brochure, 9th ed., Table 7)
        ("-12 MHz", "Hz", -12e6),  # SI prefix mega = 1e6 (BIPM SI Brochure, Table 7)
        # 1 G = 1e-4 T (BIPM SI Brochure, 8th ed., Table 9, CGS units)
        ("12 G/cm", "T/m", 0.12),
        ("1 G", "T", 1e-4),
        ("22 degC", "K", 295.15),  # t/degC = T/K - 273.15 (BIPM SI Brochure, 2.3.1)
        ("2e-9 mbar", "Pa", 2e-7),  # 1 bar = 1e5 Pa (BIPM SI Brochure, Table 8)
        (
            "1 torr",
            "Pa",
            101325.0 / 760.0,
        ),  # 1 torr = 1 atm / 760, 1 atm = 101325 Pa (ISO 80000-4)
        ("5 uK", "K", 5e-6),
        ("1e-11 cm**3/s", "m**3/s", 1e-17),
        ("4 mW/cm^2", "W/m**2", 40.0),
        ("2 %", "", 0.02),  # percent = 1e-2 (ISO 80000-1)
        ("3 ppm", "", 3e-6),
        (0.25, "", 0.25),
        ("0.5", "", 0.5),
    ],
)
def test_parse_quantity_to_si(text, unit, expected):
    assert parse_quantity(text, unit=unit, key="inputs.x.nominal") == pytest.approx(
        expected, rel=1e-12
    )


def test_unknown_unit_suggests_close_match():
    with pytest.raises(ScenarioError, match=r"'mQ' is not a unit; did you mean 'mW'\?"):
        parse_quantity("12 mQ", unit="W", key="inputs.beam_power.nominal")


def test_error_names_file_and_key():
    with pytest.raises(ScenarioError, match=r"^scenario\.toml: inputs\.beam_power\.nominal: "):
        parse_quantity("12 mQ", unit="W", key="inputs.beam_power.nominal", path="scenario.toml")


def test_bare_number_for_dimensional_input_is_refused_with_fix():
    with pytest.raises(ScenarioError, match=r"'4' has no unit; write it with a unit, e.g. '4 mW'"):
        parse_quantity("4", unit="W", key="inputs.beam_power.nominal")
    with pytest.raises(ScenarioError, match=r"has no unit"):
        parse_quantity(4, unit="W", key="inputs.beam_power.nominal")


def test_wrong_dimension_is_refused():
    with pytest.raises(ScenarioError, match=r"'4 mW' is not in units of 'Hz'"):
        parse_quantity("4 mW", unit="Hz", key="inputs.detuning.nominal")


def test_garbage_is_refused():
    with pytest.raises(ScenarioError, match=r"is not a number with a unit"):
        parse_quantity("four mW", unit="W", key="inputs.beam_power.nominal")
    with pytest.raises(ScenarioError, match=r"is not a quantity"):
        parse_quantity(True, unit="", key="inputs.x.nominal")


def test_relative_tolerance_is_fraction_of_nominal_magnitude():
    # common practice: "2 %" of a nominal means 0.02 |nominal|
    assert parse_tolerance("2 %", unit="Hz", nominal=-12e6, key="t") == pytest.approx(240e3)
    value, relative = parse_tolerance_text("50 ppm", unit="W", nominal=4e-3, key="t")
    assert relative and value == pytest.approx(2e-7)


def test_absolute_tolerances():
    assert parse_tolerance("0.1 mW", unit="W", nominal=4e-3, key="t") == pytest.approx(1e-4)
    value, relative = parse_tolerance_text("0.1 K", unit="K", nominal=300.0, key="t")
    assert not relative and value == pytest.approx(0.1)
    # a kelvin and a degree Celsius are equal as differences (BIPM SI Brochure, 2.3.1)
    assert parse_tolerance("0.1 delta_degC", unit="K", nominal=295.0, key="t") == pytest.approx(
        0.1
    )
    assert parse_tolerance("0.1 degC", unit="K", nominal=295.0, key="t") == pytest.approx(0.1)
    # dimensionless: a bare number is absolute
    assert parse_tolerance(0.01, unit="", nominal=0.05, key="t") == pytest.approx(0.01)


def test_relative_tolerance_of_offset_temperature_is_refused():
    with pytest.raises(ScenarioError, match=r"ambiguous; write it absolute, e.g. '0.1 K'"):
        parse_tolerance("2 %", unit="K", nominal=295.15, key="t", nominal_text="22 degC")
    # written in kelvin the reference is clear
    assert parse_tolerance(
        "1 %", unit="K", nominal=300.0, key="t", nominal_text="300 K"
    ) == pytest.approx(3.0)


def test_tolerance_errors():
    with pytest.raises(ScenarioError, match=r"has no unit; write it relative"):
        parse_tolerance("0.1", unit="W", nominal=1e-3, key="t")
    with pytest.raises(ScenarioError, match=r"finite non-negative"):
        parse_tolerance("-1 %", unit="W", nominal=1e-3, key="t")
    with pytest.raises(ScenarioError, match=r"relative tolerance of a zero nominal.*'0.1 mm'"):
        parse_tolerance("2 %", unit="m", nominal=0.0, key="inputs.beam_offset.tolerance")


def test_registry_gauss_is_si():
    # 1 G = 1e-4 T (BIPM SI Brochure, 8th ed., Table 9)
    assert ureg.Quantity(1, "G").to("T").magnitude == pytest.approx(1e-4)
    # 1 Oe = 1000/(4 pi) A/m (BIPM SI Brochure, 8th ed., Table 9)
    assert ureg.Quantity(1, "Oe").to("A/m").magnitude == pytest.approx(1000 / (4 * math.pi))


@pytest.mark.parametrize(
    ("value", "unit", "expected"),
    [
        (0.12, "T/m", "12 G/cm"),
        (2e-7, "Pa", "2e-09 mbar"),
        (145.57e-6, "K", "146 uK"),
        (3.2e-3, "K", "3.2 mK"),
        (300.0, "K", "300 K"),
        (-12e6, "Hz", "-12 MHz"),
        (4e-3, "W", "4 mW"),
        (5e-3, "m", "5 mm"),
        (0.25, "s", "250 ms"),
        (3.0, "m/s", "3 m/s"),
        (0.5, "", "0.5"),
    ],
)
def test_format_quantity(value, unit, expected):
    assert format_quantity(value, unit) == expected


def test_display_units_convert():
    for si, shown in DISPLAY_UNITS.items():
        if shown != "auto":
            assert ureg.parse_units(si).dimensionality == ureg.parse_units(shown).dimensionality


def test_format_quantity_edges():
    assert format_quantity(float("nan"), "K") == "nan K"
    assert format_quantity(float("inf"), "W") == "inf mW"
    assert format_quantity(0.0, "K") == "0 K"
    assert format_quantity(-3e-6, "K") == "-3 uK"
    assert format_quantity(1.23456e-3, "W", digits=5) == "1.2346 mW"
