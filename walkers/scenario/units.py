"""Quantities with units, as written in scenario files, converted to SI.

A quantity is a number followed by a unit, e.g. ``"500 kg"``, ``"25 cm/s"``, ``"1e-5 1/s"``,
``"10 mg/L"``. A bare number (TOML number or a string without a unit) is taken as already in SI.
The unit table below is the whole of what is understood; it is small on purpose so that every entry
can be checked by eye against its definition.

Conversion factors (exact by definition unless stated):
  1 ft = 0.3048 m (international foot, 1959); 1 nmi = 1852 m (international nautical mile);
  1 kn = 1852/3600 m/s; 1 t = 1000 kg; 1 L = 1e-3 m3; 1 ha = 1e4 m2;
  1 yr = 365.25 d (Julian year, as used for half-lives); 1 Pa = 1 N m-2 (SI) — all common practice.
"""

from __future__ import annotations

import difflib
import math
import re

from walkers.errors import InputError

_MINUTE = 60.0
_HOUR = 3600.0
_DAY = 86400.0
_YEAR = 365.25 * _DAY
_LITRE = 1e-3
_KNOT = 1852.0 / 3600.0

#: For each dimension: its SI unit, a plain-words name, and the accepted units with their factor to
#: SI (value_SI = number * factor). The first spelling of each unit is the one shown in messages.
UNIT_TABLE: dict[str, tuple[str, str, dict[str, float]]] = {
    "length": (
        "m",
        "a length",
        {
            "m": 1.0,
            "km": 1e3,
            "cm": 1e-2,
            "mm": 1e-3,
            "um": 1e-6,
            "µm": 1e-6,
            "μm": 1e-6,
            "ft": 0.3048,
            "nmi": 1852.0,
            "meter": 1.0,
            "meters": 1.0,
            "metre": 1.0,
            "metres": 1.0,
        },
    ),
    "time": (
        "s",
        "a time",
        {
            "s": 1.0,
            "min": _MINUTE,
            "h": _HOUR,
            "d": _DAY,
            "yr": _YEAR,
            "sec": 1.0,
            "second": 1.0,
            "seconds": 1.0,
            "minute": _MINUTE,
            "minutes": _MINUTE,
            "hr": _HOUR,
            "hour": _HOUR,
            "hours": _HOUR,
            "day": _DAY,
            "days": _DAY,
            "year": _YEAR,
            "years": _YEAR,
        },
    ),
    "mass": (
        "kg",
        "a mass",
        {"kg": 1.0, "g": 1e-3, "mg": 1e-6, "ug": 1e-9, "µg": 1e-9, "μg": 1e-9, "t": 1e3},
    ),
    "velocity": (
        "m/s",
        "a velocity",
        {
            "m/s": 1.0,
            "cm/s": 1e-2,
            "mm/s": 1e-3,
            "km/h": 1e3 / _HOUR,
            "kn": _KNOT,
            "m s-1": 1.0,
            "cm s-1": 1e-2,
            "m s^-1": 1.0,
            "m s**-1": 1.0,
            "m.s-1": 1.0,
            "cm s^-1": 1e-2,
        },
    ),
    "diffusivity": (
        "m2/s",
        "a dispersion coefficient",
        {"m2/s": 1.0, "cm2/s": 1e-4, "m^2/s": 1.0, "m2 s-1": 1.0, "km2/d": 1e6 / _DAY},
    ),
    "rate": (
        "1/s",
        "a rate",
        {
            "1/s": 1.0,
            "1/min": 1.0 / _MINUTE,
            "1/h": 1.0 / _HOUR,
            "1/d": 1.0 / _DAY,
            "1/yr": 1.0 / _YEAR,
            "/s": 1.0,
            "/h": 1.0 / _HOUR,
            "/d": 1.0 / _DAY,
            "s-1": 1.0,
            "h-1": 1.0 / _HOUR,
            "d-1": 1.0 / _DAY,
        },
    ),
    "mass_rate": (
        "kg/s",
        "a mass rate",
        {
            "kg/s": 1.0,
            "g/s": 1e-3,
            "kg/min": 1.0 / _MINUTE,
            "kg/h": 1.0 / _HOUR,
            "kg/d": 1.0 / _DAY,
            "t/h": 1e3 / _HOUR,
            "t/d": 1e3 / _DAY,
            "kg s-1": 1.0,
        },
    ),
    "concentration": (
        "kg/m3",
        "a concentration",
        {
            "kg/m3": 1.0,
            "g/m3": 1e-3,
            "mg/m3": 1e-6,
            "g/L": 1e-3 / _LITRE,
            "mg/L": 1e-6 / _LITRE,
            "ug/L": 1e-9 / _LITRE,
            "µg/L": 1e-9 / _LITRE,
            "μg/L": 1e-9 / _LITRE,
            "ng/L": 1e-12 / _LITRE,
            "mg/l": 1e-6 / _LITRE,
            "ug/l": 1e-9 / _LITRE,
            "g/l": 1e-3 / _LITRE,
            "kg m-3": 1.0,
        },
    ),
    "area": (
        "m2",
        "an area",
        {"m2": 1.0, "km2": 1e6, "ha": 1e4, "cm2": 1e-4, "m^2": 1.0, "m**2": 1.0},
    ),
    "stress": (
        "Pa",
        "a stress",
        {"Pa": 1.0, "N/m2": 1.0, "N m-2": 1.0, "mPa": 1e-3, "kPa": 1e3},
    ),
    "density": (
        "kg/m3",
        "a density",
        {"kg/m3": 1.0, "kg m-3": 1.0, "g/cm3": 1e3, "t/m3": 1e3},
    ),
    "areal_density": (
        "kg/m2",
        "a mass per bed area",
        {"kg/m2": 1.0, "g/m2": 1e-3, "mg/m2": 1e-6, "kg m-2": 1.0, "g m-2": 1e-3, "t/km2": 1e-3},
    ),
}

DIMENSIONS = tuple(UNIT_TABLE)

_NUMBER_UNIT = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")


def accepted_units(dimension: str) -> str:
    """The units accepted for ``dimension``, as a comma-separated string for messages and docs."""
    return ", ".join(UNIT_TABLE[dimension][2])


def _dimension_of(unit: str) -> str | None:
    for dim, (_, _, units) in UNIT_TABLE.items():
        if unit in units:
            return dim
    return None


def unit_factor(unit: str, dimension: str, where: str) -> float:
    """The factor that converts a value in ``unit`` to the SI unit of ``dimension``.

    Used for unit names given on their own (e.g. the units of a flow-file variable, ``"cm/s"``).
    Raises :class:`InputError` naming ``where`` if the unit is unknown or of another dimension.
    """
    if dimension not in UNIT_TABLE:
        raise ValueError(f"unknown dimension {dimension!r}; known: {', '.join(DIMENSIONS)}")
    si, noun, units = UNIT_TABLE[dimension]
    unit = unit.strip()
    if unit in units:
        return units[unit]
    other = _dimension_of(unit)
    if other is not None:
        raise InputError(
            f"{where}: unit {unit!r} is {UNIT_TABLE[other][1]} unit but {noun} is needed; "
            f"accepted units: {accepted_units(dimension)} (a bare number is in {si})"
        )
    hint = difflib.get_close_matches(unit, list(units), n=1, cutoff=0.5)
    did_you_mean = f" (did you mean {hint[0]!r}?)" if hint else ""
    raise InputError(
        f"{where}: unknown unit {unit!r}{did_you_mean}; {noun} is needed, accepted units: "
        f"{accepted_units(dimension)} (a bare number is in {si})"
    )


def parse_quantity(value: object, dimension: str, where: str) -> float:
    """Convert a scenario value to a finite float in the SI unit of ``dimension``.

    Parameters
    ----------
    value : a number (taken as SI) or a string ``"<number> <unit>"``, e.g. ``"25 cm/s"``.
    dimension : one of :data:`DIMENSIONS` (length m, time s, mass kg, velocity m s-1,
        diffusivity m2 s-1, rate s-1, mass_rate kg s-1, concentration kg m-3, area m2, stress Pa,
    density kg m-3).
    where : the key path for messages, e.g. ``"releases[0].mass"``.

    Raises
    ------
    InputError
        naming ``where``, the value given and the accepted units, if the value is not a number,
        has an unknown unit or a unit of another dimension, or is not finite.
    """
    if dimension not in UNIT_TABLE:
        raise ValueError(f"unknown dimension {dimension!r}; known: {', '.join(DIMENSIONS)}")
    si, noun, _ = UNIT_TABLE[dimension]
    expected = (
        f"expected {noun} such as '1.5 {si}'; accepted units: {accepted_units(dimension)} "
        f"(a bare number is in {si})"
    )
    if isinstance(value, bool) or not isinstance(value, int | float | str):
        raise InputError(f"{where} = {value!r}: {expected}")
    if isinstance(value, str):
        match = _NUMBER_UNIT.match(value)
        if match is None:
            raise InputError(f"{where} = {value!r}: not a number with a unit; {expected}")
        number = float(match.group(1))
        unit = match.group(2)
        factor = unit_factor(unit, dimension, f"{where} = {value!r}") if unit else 1.0
        result = number * factor
    else:
        try:
            result = float(value)
        except OverflowError:
            result = math.inf
    if not math.isfinite(result):
        raise InputError(f"{where} = {value!r}: must be a finite number; {expected}")
    return result
