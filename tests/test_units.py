"""Unit conversions of scenario quantities, checked against hand values.

Factors are the SI definitions (BIPM 2019, The International System of Units, 9th ed.):
1 min = 60 s, 1 h = 3600 s, 1 d = 86400 s, 1 L = 1e-3 m3, 1 t = 1000 kg; 1 nmi = 1852 m and
1 ft = 0.3048 m by international agreement (common practice); 1 yr = 365.25 d (Julian year;
common practice).
"""

import math

import pytest

from walkers.errors import InputError
from walkers.scenario.units import (
    DIMENSIONS,
    UNIT_TABLE,
    accepted_units,
    parse_quantity,
    unit_factor,
)

HAND_VALUES = [
    ("500 kg", "mass", 500.0),
    ("250 g", "mass", 0.25),
    ("1.5 t", "mass", 1500.0),
    ("20 mg", "mass", 20e-6),
    ("7 ug", "mass", 7e-9),
    ("6 h", "time", 21600.0),
    ("3 d", "time", 259200.0),
    ("30 min", "time", 1800.0),
    ("12.4 h", "time", 44640.0),
    ("2 yr", "time", 2 * 365.25 * 86400.0),
    ("45 s", "time", 45.0),
    ("2 km", "length", 2000.0),
    ("25 cm", "length", 0.25),
    ("3 nmi", "length", 5556.0),
    ("10 ft", "length", 3.048),
    ("0.5 m/s", "velocity", 0.5),
    ("25 cm/s", "velocity", 0.25),
    ("36 km/h", "velocity", 10.0),
    ("2 kn", "velocity", 2 * 1852.0 / 3600.0),
    ("0.3 m s-1", "velocity", 0.3),
    ("2 m2/s", "diffusivity", 2.0),
    ("500 cm2/s", "diffusivity", 0.05),
    ("1e-5 1/s", "rate", 1e-5),
    ("0.1 1/d", "rate", 0.1 / 86400.0),
    ("3.6 1/h", "rate", 0.001),
    ("5 kg/s", "mass_rate", 5.0),
    ("3 t/h", "mass_rate", 3000.0 / 3600.0),
    ("36 kg/h", "mass_rate", 0.01),
    ("10 mg/L", "concentration", 0.01),
    ("0.1 kg/m3", "concentration", 0.1),
    ("1 ug/L", "concentration", 1e-6),
    ("1 µg/L", "concentration", 1e-6),
    ("4 g/m3", "concentration", 4e-3),
    ("2 ha", "area", 2e4),
    ("1.5 km2", "area", 1.5e6),
    ("120 m2", "area", 120.0),
    ("20 um", "length", 20e-6),
    ("0.2 Pa", "stress", 0.2),
    ("150 mPa", "stress", 0.15),
    ("2.65 g/cm3", "density", 2650.0),
]


@pytest.mark.parametrize(("text", "dimension", "expected"), HAND_VALUES)
def test_quantity_converts_to_si_hand_value(text, dimension, expected):
    assert parse_quantity(text, dimension, "k") == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("dimension", DIMENSIONS)
def test_bare_number_is_taken_as_si(dimension):
    assert parse_quantity(3, dimension, "k") == 3.0
    assert parse_quantity(2.5, dimension, "k") == 2.5
    assert parse_quantity("2.5", dimension, "k") == 2.5


def test_spacing_and_signs_are_tolerated():
    assert parse_quantity("  25cm/s ", "velocity", "k") == pytest.approx(0.25)
    assert parse_quantity("-2 h", "time", "k") == -7200.0
    assert parse_quantity(".5 km", "length", "k") == 500.0
    assert parse_quantity("1E3 m", "length", "k") == 1000.0


def test_every_unit_of_the_table_parses_to_its_factor():
    for dimension, (_, _, units) in UNIT_TABLE.items():
        for unit, factor in units.items():
            assert parse_quantity(f"2 {unit}", dimension, "k") == pytest.approx(2 * factor)


def test_wrong_dimension_names_key_value_and_accepted_units():
    with pytest.raises(InputError) as err:
        parse_quantity("500 m", "mass", "releases[0].mass")
    msg = str(err.value)
    assert "releases[0].mass" in msg
    assert "'500 m'" in msg
    assert "length" in msg and "mass" in msg
    assert accepted_units("mass") in msg


def test_unknown_unit_suggests_the_nearest():
    with pytest.raises(InputError, match=r"did you mean 'kg'") as err:
        parse_quantity("5 kgg", "mass", "releases[0].mass")
    assert "releases[0].mass" in str(err.value)


@pytest.mark.parametrize("bad", ["1e400 m", "1e308 km", 1e400, float("nan"), float("inf")])
def test_non_finite_values_are_refused(bad):
    with pytest.raises(InputError, match="finite"):
        parse_quantity(bad, "length", "output.bandwidth")


@pytest.mark.parametrize("bad", ["nan m", "inf m"])
def test_nan_and_inf_words_are_not_numbers(bad):
    with pytest.raises(InputError, match="output.bandwidth.*not a number"):
        parse_quantity(bad, "length", "output.bandwidth")


@pytest.mark.parametrize("bad", [True, None, [1, "m"], {"m": 1}, "metres five", ""])
def test_non_quantities_are_refused_with_accepted_units(bad):
    with pytest.raises(InputError) as err:
        parse_quantity(bad, "length", "releases[0].x")
    assert "releases[0].x" in str(err.value)
    assert "km" in str(err.value)


def test_huge_integer_overflows_to_an_input_error():
    with pytest.raises(InputError, match="finite"):
        parse_quantity(10**400, "mass", "k")


def test_unit_factor_of_a_unit_alone():
    assert unit_factor("cm/s", "velocity", "flow.units.u") == 0.01
    with pytest.raises(InputError, match="flow.units.u"):
        unit_factor("m", "velocity", "flow.units.u")


def test_half_life_to_rate_hand_value():
    # k = ln 2 / T (first-order decay; common practice): T = 12 h -> k = 1.6046e-5 s-1.
    k = math.log(2) / parse_quantity("12 h", "time", "decay.half_life")
    assert k == pytest.approx(0.6931471805599453 / 43200.0, rel=1e-12)
    assert k == pytest.approx(1.6046e-5, rel=1e-4)
