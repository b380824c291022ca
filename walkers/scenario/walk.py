"""Walking a scenario table against the schema: unknown keys (with a "did you mean"), types,
conditions, bounds, and the conversion of each value to SI units.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
from datetime import datetime
from pathlib import Path
from typing import Any

from walkers.errors import InputError
from walkers.scenario.keys import KINDS, Choice, Key, Section
from walkers.scenario.units import accepted_units, parse_quantity, unit_factor

# --------------------------------------------------------------------------------------------
# Walking a table against the schema.
# --------------------------------------------------------------------------------------------


def _join(path: str, key: str) -> str:
    return f"{path}.{key}" if path else key


def _type_name(value: object) -> str:
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int | float):
        return "a number"
    if isinstance(value, str):
        return "text"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list | tuple):
        return "a list"
    if isinstance(value, datetime):
        return "a date-time"
    return f"a {type(value).__name__}"


def _condition_met(condition: str, data: dict[str, Any], section: Section) -> bool:
    """Whether ``"key"`` is present or ``"key=value"`` holds (defaults count) in ``data``."""
    if not condition:
        return True
    key, _, wanted = condition.partition("=")
    if not wanted:
        return key in data
    spec = section.keys[key]
    value = data.get(key, spec.default if isinstance(spec, Key) else None)
    return isinstance(value, str | int) and not isinstance(value, bool) and str(value) == wanted


def _condition_text(condition: str) -> str:
    key, _, wanted = condition.partition("=")
    if not wanted:
        return f"{key} is given"
    return f"{key} = {wanted}" if wanted.isdigit() else f"{key} = {wanted!r}"


def _alternatives_text(choice: Choice) -> str:
    return " | ".join(" + ".join(group) for group in choice.alternatives)


def _walk(section: Section, data: object, path: str) -> dict[str, Any]:
    """Check ``data`` against ``section``; return the converted values (None where absent)."""
    label = path or "the scenario"
    if not isinstance(data, dict):
        raise InputError(f"{label}: expected a table of keys, got {_type_name(data)} {data!r}")
    names = list(section.keys)
    for key in data:
        if not isinstance(key, str) or key not in section.keys:
            hint = difflib.get_close_matches(str(key), names, n=1, cutoff=0.6)
            did_you_mean = f"; did you mean {hint[0]!r}?" if hint else ""
            raise InputError(
                f"{_join(path, str(key))}: unknown key{did_you_mean} Keys accepted in "
                f"{label}: {', '.join(names)}"
            )
    for key in data:
        spec = section.keys[key]
        if spec.only_when and not _condition_met(spec.only_when, data, section):
            raise InputError(
                f"{_join(path, key)}: applies only when {_condition_text(spec.only_when)}"
            )
    for choice in section.choices:
        if choice.only_when and not _condition_met(choice.only_when, data, section):
            continue
        given = []
        for group in choice.alternatives:
            present = [k for k in group if k in data]
            if present and len(present) < len(group):
                missing = [k for k in group if k not in data]
                raise InputError(
                    f"{label}: {', '.join(present)} needs {', '.join(missing)} as well "
                    f"(give {' + '.join(group)} together)"
                )
            if present:
                given.append(group)
        if len(given) > 1:
            raise InputError(
                f"{label}: give only one of {_alternatives_text(choice)}; got "
                f"{' and '.join(' + '.join(g) for g in given)}"
            )
        if not given and choice.required:
            raise InputError(f"{label}: missing; give one of {_alternatives_text(choice)}")
    out: dict[str, Any] = {}
    for key, spec in section.keys.items():
        where = _join(path, key)
        if isinstance(spec, Section):
            if spec.many:
                items = data.get(key, [])
                if not isinstance(items, list) or not all(isinstance(t, dict) for t in items):
                    raise InputError(
                        f"{where}: expected an array of tables ([[{key}]] in TOML), got "
                        f"{_type_name(items)}"
                    )
                if spec.required and not items:
                    raise InputError(f"{where}: at least one [[{key}]] table is required")
                out[key] = [_walk(spec, item, f"{where}[{i}]") for i, item in enumerate(items)]
            elif key in data:
                out[key] = _walk(spec, data[key], where)
            elif spec.required:
                raise InputError(f"{where}: the [{where}] table is required. {spec.help}")
            else:
                out[key] = None
        elif key in data:
            out[key] = _convert(spec, data[key], where)
        elif spec.required:
            raise InputError(
                f"{where}: required key missing ({KINDS[spec.kind]}{_units_note(spec)}). "
                f"{spec.help}"
            )
        elif spec.default is not None:
            out[key] = _convert(spec, spec.default, where)
        else:
            out[key] = None
    return out


def _units_note(spec: Key) -> str:
    if spec.kind in ("quantity", "quantities") and spec.dimension:
        return f", in {accepted_units(spec.dimension)}"
    return ""


def _check_bound(value: float, spec: Key, where: str, raw: object) -> None:
    if spec.bound == "positive" and not value > 0:
        raise InputError(f"{where} = {raw!r}: must be greater than 0")
    if spec.bound == "nonnegative" and not value >= 0:
        raise InputError(f"{where} = {raw!r}: must be 0 or greater")


def _is_number(value: object) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _finite(value: object) -> bool:
    """Whether ``value`` is a number (not a boolean) that converts to a finite float."""
    if not isinstance(value, int | float) or isinstance(value, bool):
        return False
    try:
        return math.isfinite(float(value))
    except OverflowError:
        return False


def _resolve_path(name: str, base: Path, where: str) -> Path:
    """``name`` as an absolute path; relative paths are taken from ``base``."""
    try:
        path = Path(name).expanduser()
    except RuntimeError:
        raise InputError(f"{where} = {name!r}: cannot expand '~' in this path") from None
    return path if path.is_absolute() else base / path


def _parse_time(value: object, where: str) -> datetime:
    example = 'expected an ISO 8601 date-time with a zone, e.g. "2026-05-04T06:00:00Z"'
    if isinstance(value, datetime):
        stamp = value
    elif isinstance(value, str):
        try:
            stamp = datetime.fromisoformat(value.strip())
        except ValueError:
            raise InputError(f"{where} = {value!r}: not a date-time; {example}") from None
    else:
        raise InputError(f"{where} = {value!r}: {example}, got {_type_name(value)}")
    if stamp.tzinfo is None or stamp.utcoffset() is None:
        raise InputError(
            f'{where} = {value!r}: no time zone; add one ("Z" for UTC or e.g. "+01:00"); {example}'
        )
    return stamp


def _convert(spec: Key, raw: object, where: str) -> Any:
    """Convert one value of kind ``spec.kind``; raise InputError naming ``where`` if it is bad."""
    kind = spec.kind
    if kind in ("text", "choice"):
        if not isinstance(raw, str) or not raw.strip() or "\x00" in raw:
            raise InputError(f"{where} = {raw!r}: expected {KINDS[kind]}, got {_type_name(raw)}")
        if kind == "choice" and raw not in spec.allowed:
            hint = difflib.get_close_matches(raw, spec.allowed, n=1, cutoff=0.6)
            did_you_mean = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise InputError(
                f"{where} = {raw!r}{did_you_mean}: expected one of "
                f"{', '.join(repr(a) for a in spec.allowed)}"
            )
        return raw.strip()
    if kind == "integer":
        if not isinstance(raw, int) or isinstance(raw, bool):
            raise InputError(f"{where} = {raw!r}: expected a whole number, got {_type_name(raw)}")
        _check_bound(raw, spec, where, raw)
        return raw
    if kind == "number":
        if not isinstance(raw, int | float) or not _finite(raw):
            raise InputError(f"{where} = {raw!r}: expected a finite number without units")
        _check_bound(float(raw), spec, where, raw)
        return float(raw)
    if kind == "boolean":
        if not isinstance(raw, bool):
            raise InputError(f"{where} = {raw!r}: expected true or false, got {_type_name(raw)}")
        return raw
    if kind == "quantity":
        value = parse_quantity(raw, spec.dimension or "", where)
        _check_bound(value, spec, where, raw)
        return value
    if kind == "time":
        return _parse_time(raw, where)
    if kind == "unit":
        if not isinstance(raw, str):
            raise InputError(f"{where} = {raw!r}: expected a unit name such as 'cm/s'")
        unit_factor(raw, spec.dimension or "", f"{where} = {raw!r}")
        return raw.strip()
    if kind == "coordinate":
        if not (_is_number(raw) or isinstance(raw, str)):
            raise InputError(
                f"{where} = {raw!r}: expected a grid coordinate (a number, or a length such as "
                f'"2 km"), got {_type_name(raw)}'
            )
        return raw
    if kind == "degrees":
        if not isinstance(raw, int | float) or not _finite(raw):
            raise InputError(f"{where} = {raw!r}: expected a number of degrees")
        return float(raw)
    if kind == "paths":
        items = [raw] if isinstance(raw, str) else raw
        if (
            not isinstance(items, list)
            or not items
            or not all(isinstance(p, str) and p.strip() and "\x00" not in p for p in items)
        ):
            raise InputError(
                f"{where} = {raw!r}: expected a file path or a non-empty list of file paths"
            )
        return [p.strip() for p in items]
    return _convert_list(spec, raw, where)


def _convert_list(spec: Key, raw: object, where: str) -> Any:
    """Convert a value of one of the list kinds; raise InputError naming ``where`` if it is bad."""
    kind = spec.kind
    if not isinstance(raw, list) or not raw:
        raise InputError(
            f"{where} = {raw!r}: expected a non-empty list ({KINDS[kind]}), got {_type_name(raw)}"
        )
    if spec.length and len(raw) != spec.length:
        raise InputError(f"{where} = {raw!r}: expected a list of {spec.length} items")
    if kind == "quantities":
        values = [
            parse_quantity(v, spec.dimension or "", f"{where}[{i}]") for i, v in enumerate(raw)
        ]
        for i, v in enumerate(values):
            _check_bound(v, spec, f"{where}[{i}]", raw[i])
        return values
    if kind in ("integers", "numbers"):
        sub = dataclasses.replace(spec, kind=kind[:-1])
        return [_convert(sub, v, f"{where}[{i}]") for i, v in enumerate(raw)]
    if kind == "times_or_offsets":
        return [_time_or_offset(v, f"{where}[{i}]") for i, v in enumerate(raw)]
    if kind == "points":
        for i, pair in enumerate(raw):
            if not (
                isinstance(pair, list)
                and len(pair) == 2
                and all(_is_number(c) or isinstance(c, str) for c in pair)
            ):
                raise InputError(f"{where}[{i}] = {pair!r}: expected a pair [x, y]")
        return raw
    raise ValueError(f"schema error: unknown kind {kind!r} at {where}")


def _time_or_offset(raw: object, where: str) -> tuple[str, Any]:
    """("time", datetime) for an ISO 8601 date-time, ("offset", seconds) for a duration."""
    if isinstance(raw, datetime) or (isinstance(raw, str) and "T" in raw and ":" in raw):
        return "time", _parse_time(raw, where)
    try:
        return "offset", parse_quantity(raw, "time", where)
    except InputError:
        raise InputError(
            f'{where} = {raw!r}: expected a time offset from the release start such as "1 h" '
            'or an ISO 8601 date-time with a zone such as "2026-05-04T07:00:00Z"'
        ) from None


# --------------------------------------------------------------------------------------------
# Building the typed objects.
# --------------------------------------------------------------------------------------------


def _coordinate(raw: object, where: str, geographic: bool) -> float:
    """A grid coordinate: metres (number or length) on projected grids, degrees on geographic."""
    if not geographic:
        return parse_quantity(raw, "length", where)
    if isinstance(raw, int | float) and _finite(raw):
        return float(raw)
    if isinstance(raw, str):
        number, _, unit = raw.strip().partition(" ")
        if unit.strip() in ("deg", "degrees", "°"):
            try:
                value = float(number)
            except ValueError:
                value = math.nan
            if math.isfinite(value):
                return value
    raise InputError(
        f"{where} = {raw!r}: positions are lon/lat, so grid coordinates are degrees: give a "
        'number (or "<number> deg")'
    )


def _check_lonlat(lon: float, lat: float, where: str) -> None:
    if not (-180.0 <= lon <= 360.0 and -90.0 <= lat <= 90.0):
        raise InputError(
            f"{where}: lon = {lon!r}, lat = {lat!r}: need -180 <= lon <= 360 and -90 <= lat <= 90"
        )


def _geographic(raw: dict[str, Any]) -> bool:
    """Whether positions are lon/lat; mixing lon/lat and x/y is refused."""
    styles = set()
    for table in ("releases", "receptors", "detections", "candidates"):
        items = raw.get(table)
        for i, item in enumerate(items if isinstance(items, list) else []):
            if not isinstance(item, dict):
                continue
            if "lon" in item or "lat" in item or "points_lonlat" in item:
                styles.add(("geographic", f"{table}[{i}]"))
            if "x" in item or "y" in item or "points" in item:
                styles.add(("projected", f"{table}[{i}]"))
    kinds = {s for s, _ in styles}
    if len(kinds) > 1:
        geo = sorted(w for s, w in styles if s == "geographic")[0]
        proj = sorted(w for s, w in styles if s == "projected")[0]
        raise InputError(
            f"{geo} uses lon/lat but {proj} uses x/y: give all positions one way (x/y in metres "
            "for projected grids, lon/lat in degrees for geographic grids)"
        )
    return kinds == {"geographic"}


def _seconds(a: datetime, b: datetime) -> float:
    """b - a in seconds."""
    return (b - a).total_seconds()
