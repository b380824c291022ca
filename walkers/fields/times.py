"""CF time axes: flow frame times and result time coordinates to and from ISO 8601."""

from __future__ import annotations

import datetime as _dt
import datetime as dt
import re
from typing import Any

import cftime
import numpy as np
import xarray as xr

from walkers.errors import InputError
from walkers.fields.base import FlowField

# ----------------------------------------------------------------------------------------------
# Times
# ----------------------------------------------------------------------------------------------


def _iso(date: Any) -> str:
    return f"{date.isoformat()}+00:00"


def _seconds_iso(seconds: float, time_units: str, calendar: str) -> str:
    date = cftime.num2date(float(seconds), time_units, calendar, only_use_cftime_datetimes=True)
    return _iso(date)


def flow_time_iso(flow: FlowField, seconds: float) -> str:
    """ISO 8601 (UTC) of a time given in seconds in the flow's frame."""
    return _seconds_iso(seconds, flow.time_units, flow.calendar)


_ISO_RE = re.compile(
    r"^(?P<y>[+-]?\d{4,})-(?P<mo>\d{2})-(?P<d>\d{2})"
    r"(?:[T ](?P<h>\d{2}):(?P<mi>\d{2})(?::(?P<s>\d{2})(?:[.,](?P<f>\d{1,6})\d*)?)?)?"
    r"\s*(?P<z>Z|z|UTC|[+-]\d{2}(?::?\d{2})?)?$"
)


def _to_seconds(when: Any, time_units: str, calendar: str) -> float:
    """Seconds in the frame (time_units, calendar) of a date-time given with a zone.

    Strings are parsed here rather than by :mod:`datetime` so that dates of non-standard
    calendars (e.g. 30 February in a 360_day calendar) can be written.
    """
    if isinstance(when, cftime.datetime | _dt.datetime):
        if isinstance(when, _dt.datetime) and (when.tzinfo is None or when.utcoffset() is None):
            raise InputError(
                f"time {when.isoformat()!r}: no time zone; add one, e.g. 'Z' for UTC or '+01:00'"
            )
        parts = (
            when.year,
            when.month,
            when.day,
            when.hour,
            when.minute,
            when.second,
            when.microsecond,
        )
        given = when.utcoffset() if isinstance(when, _dt.datetime) else None  # cftime: UTC
        offset = given or _dt.timedelta(0)
    elif isinstance(when, str):
        m = _ISO_RE.match(when.strip())
        if m is None:
            raise InputError(
                f"time {when!r}: not an ISO 8601 date-time; write e.g. '2026-03-01T06:00:00Z'"
            )
        if m["z"] is None:
            raise InputError(
                f"time {when!r}: no time zone; add one, e.g. 'Z' for UTC or '+01:00' "
                "(write '2026-03-01T06:00:00Z')"
            )
        parts = (
            int(m["y"]),
            int(m["mo"]),
            int(m["d"]),
            int(m["h"] or 0),
            int(m["mi"] or 0),
            int(m["s"] or 0),
            int((m["f"] or "0").ljust(6, "0")),
        )
        zone = m["z"].upper()
        if zone in ("Z", "UTC"):
            offset = _dt.timedelta(0)
        else:
            digits = zone[1:].replace(":", "")
            minutes = int(digits[:2]) * 60 + (int(digits[2:4]) if len(digits) > 2 else 0)
            offset = _dt.timedelta(minutes=minutes if zone[0] == "+" else -minutes)
    else:
        raise InputError(f"time {when!r}: expected an ISO 8601 string or a datetime")
    try:
        date = cftime.datetime(*parts, calendar=calendar) - offset
    except ValueError as exc:
        raise InputError(
            f"time {when!r}: this date does not exist in the flow's {calendar!r} calendar ({exc})"
        ) from exc
    return float(cftime.date2num(date, time_units, calendar))


def to_flow_seconds(when: Any, flow: FlowField) -> float:
    """Seconds in the flow's time frame (``flow.time_units``, ``flow.calendar``) of a date-time.

    ``when`` is an ISO 8601 string or a datetime, either with a time zone (a naive time is an
    InputError: the zone must be stated), or a cftime datetime (taken as UTC in the flow calendar).
    """
    return _to_seconds(when, flow.time_units, flow.calendar)


def check_time_window(flow: FlowField, t0: float, t1: float) -> None:
    """InputError unless the times [t0, t1] (s, flow frame) lie within the flow's frames.

    A steady flow (one frame) covers all times.
    """
    if flow.steady:
        return
    first, last = float(flow.times[0]), float(flow.times[-1])
    if t0 < first - 1e-6 or t1 > last + 1e-6 or t1 < t0:
        raise InputError(
            f"the run covers {flow_time_iso(flow, t0)} to {flow_time_iso(flow, t1)} but the flow "
            f"({flow.source}) has frames from {flow_time_iso(flow, first)} to "
            f"{flow_time_iso(flow, last)}; move the release/run times inside the flow's span or "
            "supply flow files that cover the run"
        )


# --------------------------------------------------------------------------------------------
# times
# --------------------------------------------------------------------------------------------


def _split_time_units(units: str) -> tuple[str, dt.datetime]:
    """Split CF time units ``"<unit> since <reference>"`` into the unit and an aware reference.

    A reference without a zone is UTC, as in CF §4.4 and UDUNITS.
    """
    unit, sep, ref = units.partition(" since ")
    if not sep:
        raise InputError(f"time units {units!r}: expected '<unit> since <ISO 8601 date-time>'")
    text = re.sub(r"\s*(UTC|utc)$", "", ref.strip())
    text = re.sub(r"\s+([+-]\d{1,2}(:?\d{2})?)$", r"\1", text)  # "... 00:00 +02:00"
    try:
        reference = dt.datetime.fromisoformat(text)
    except ValueError as exc:
        raise InputError(f"time units {units!r}: reference date-time is not ISO 8601") from exc
    if reference.tzinfo is None:
        reference = reference.replace(tzinfo=dt.UTC)
    return unit.strip(), reference


def _format_offset(reference: dt.datetime) -> str:
    offset = reference.utcoffset() or dt.timedelta(0)
    minutes = int(offset.total_seconds() // 60)
    sign = "+" if minutes >= 0 else "-"
    return f"{sign}{abs(minutes) // 60:02d}:{abs(minutes) % 60:02d}"


def iso_times(time: xr.DataArray) -> list[str]:
    """ISO 8601 date-times with zone of a time coordinate, e.g. ``2024-05-14T07:00:00+02:00``.

    A numeric coordinate with CF ``units``/``calendar`` attributes (as a run returns it) is shown
    in the zone of its reference time and in its calendar; a decoded coordinate (datetime64 or
    cftime objects, as :func:`read_results` returns it) is shown in UTC.
    """
    values = np.asarray(time.values)
    if np.issubdtype(values.dtype, np.number) and "units" in time.attrs:
        unit, reference = _split_time_units(str(time.attrs["units"]))
        naive = reference.replace(tzinfo=None).isoformat()
        dates = cftime.num2date(
            values, f"{unit} since {naive}", calendar=time.attrs.get("calendar", "standard")
        )
        zone = _format_offset(reference)
        return [d.isoformat(timespec="seconds").replace(" ", "T") + zone for d in dates]
    if np.issubdtype(values.dtype, np.datetime64):
        return [str(np.datetime_as_string(v, unit="s")) + "+00:00" for v in values]
    return [d.isoformat(timespec="seconds").replace(" ", "T") + "+00:00" for d in values]


def elapsed_seconds(time: xr.DataArray) -> np.ndarray:
    """Seconds since the first output time (float64), for a numeric or a decoded time axis."""
    values = np.asarray(time.values)
    if np.issubdtype(values.dtype, np.number):
        unit, _ = _split_time_units(str(time.attrs.get("units", "seconds since 1970-01-01")))
        scale = {"seconds": 1.0, "minutes": 60.0, "hours": 3600.0, "days": 86400.0}
        factor = scale.get(unit.lower(), 1.0)
        return (values.astype(np.float64) - float(values[0])) * factor
    if np.issubdtype(values.dtype, np.datetime64):
        return (values - values[0]) / np.timedelta64(1, "s")
    return np.array([(v - values[0]).total_seconds() for v in values])
