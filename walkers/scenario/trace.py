"""Loading a trace scenario (``walkers trace``): the keys of
:data:`walkers.scenario.trace_schema.TRACE_SCHEMA` checked and converted to SI, giving a
:class:`TraceScenario`.

The run part (flow, dispersion, decay, edges, output grid, time step) is an ordinary
:class:`~walkers.scenario.specs.Scenario` without releases or receptors, so the flow, the
transport and the places are built and checked exactly as for a run. Detection and candidate
times are seconds from the run start, like release times.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any, Literal

from walkers.errors import InputError
from walkers.scenario.build import (
    _build_dispersion,
    _build_flow,
    _build_output_grid,
)
from walkers.scenario.load import _output_path, _run_times, _transports, read_source
from walkers.scenario.sources import Candidate, Detection, ErrorModel
from walkers.scenario.specs import Scenario
from walkers.scenario.trace_schema import TRACE_SCHEMA
from walkers.scenario.walk import _check_lonlat, _coordinate, _geographic, _seconds, _walk


@dataclass(frozen=True)
class TraceScenario:
    """A checked trace scenario: the run part, the detections, the candidates, the error model
    and the number of backward particles per detection (SI; times from the run start)."""

    run: Scenario
    detections: list[Detection]
    candidates: list[Candidate]
    model: ErrorModel
    particles: int


def load_trace_scenario(
    source: str | Path | dict[str, Any], *, base_dir: str | Path | None = None
) -> TraceScenario:
    """Read, check and convert a trace scenario (a TOML file path or a parsed dict).

    Raises InputError for anything wrong, naming the file, the key path and what is accepted.
    """
    raw, label, stem, text, source_path, base = read_source(source, base_dir)
    try:
        return _build(raw, base, stem, text, source_path)
    except InputError as err:
        raise InputError(f"{label}: {err}") from None


def _build(
    raw: dict[str, Any], base: Path, stem: str, text: str | None, source_path: Path | None
) -> TraceScenario:
    geographic = _geographic(raw)
    s = _walk(TRACE_SCHEMA, raw, "")
    run = s["run"]
    start, end, run_length, dt, interval = _run_times(run)
    if geographic and s["flow"]["analytic"] is not None:
        raise InputError(
            "flow.analytic: analytic flows are laid out in metres; give positions as x/y"
        )
    flow = _build_flow(s["flow"], base, start, end, run_length)
    dispersion = _build_dispersion(s["dispersion"])
    base_transport, transport = _transports(s, run["scheme"], dt, dispersion)
    out = s["output"]
    scenario = Scenario(
        title=run["title"] or stem,
        start_iso=start.isoformat(),
        end_iso=end.isoformat(),
        start=start,
        end=end,
        dt=dt,
        output_interval=interval,
        seed=run["seed"],
        substep=run["substep"],
        tracks=0,
        transport=transport,
        dispersion=dispersion,
        releases=[],
        output=_build_output_grid(out["grid"], out["bandwidth"], geographic),
        receptors=[],
        flow=flow,
        output_path=_output_path(out["file"], stem, base, source_path),
        ensemble=None,
        geographic=geographic,
        text=text,
        source_path=source_path,
        transport_base=base_transport,
        comment=run["comment"] or "",
    )
    a = s["attribution"]
    if not 0 < a["interval"] < 1:
        raise InputError(
            f"attribution.interval = {a['interval']!r}: a probability between 0 and 1, e.g. 0.9"
        )
    if not a["mass_min"] < a["mass_max"]:
        raise InputError("attribution.mass_min must be smaller than attribution.mass_max")
    model = ErrorModel(
        sigma=a["sigma"],
        mass_min=a["mass_min"],
        mass_max=a["mass_max"],
        time_bins=a["release_bins"],
        level=a["interval"],
    )
    return TraceScenario(
        run=scenario,
        detections=_detections(s["detections"], start, end),
        candidates=_candidates(s["candidates"], start, end),
        model=model,
        particles=a["particles"],
    )


def _place(item: dict[str, Any], where: str) -> tuple[float, float]:
    if item["x"] is not None:
        return _coordinate(item["x"], f"{where}.x", False), _coordinate(
            item["y"], f"{where}.y", False
        )
    _check_lonlat(item["lon"], item["lat"], where)
    return float(item["lon"]), float(item["lat"])


def _window(
    item: dict[str, Any], where: str, start: datetime, end: datetime, first: str, last: str
) -> tuple[float, float]:
    """A window in seconds from the run start, checked to lie in the run."""
    a = item[first] if item[first] is not None else start
    b = item[last] if item[last] is not None else end
    for key, when in ((first, a), (last, b)):
        if not start <= when <= end:
            raise InputError(
                f"{where}.{key} = {when.isoformat()}: must lie in the period examined, from "
                f"run.start ({start.isoformat()}) to run.end ({end.isoformat()})"
            )
    if b < a:
        raise InputError(f"{where}: {last} is before {first}; swap them")
    return _seconds(start, a), _seconds(start, b)


def _unique(name: str, names: set[str], where: str) -> str:
    if name in names:
        raise InputError(f"{where}.name = {name!r}: names must differ")
    names.add(name)
    return name


def _detections(items: list[dict[str, Any]], start: datetime, end: datetime) -> list[Detection]:
    out: list[Detection] = []
    names: set[str] = set()
    for i, d in enumerate(items):
        where = f"detections[{i}]"
        name = _unique(d["name"] or f"detection{i + 1}", names, where)
        x, y = _place(d, where)
        if d["time"] is not None:
            t0, t1 = _window({"time": d["time"]}, where, start, end, "time", "time")
        else:
            t0, t1 = _window(d, where, start, end, "start", "end")
        if d["concentration"] is not None:
            out.append(
                Detection(name, x, y, t0, t1, "measured", d["concentration"], radius=d["radius"])
            )
        else:
            kind: Literal["present", "absent"] = d["result"]
            out.append(
                Detection(
                    name,
                    x,
                    y,
                    t0,
                    t1,
                    kind,
                    detection_limit=d["detection_limit"],
                    radius=d["radius"],
                )
            )
    return out


def _candidates(items: list[dict[str, Any]], start: datetime, end: datetime) -> list[Candidate]:
    out: list[Candidate] = []
    names: set[str] = set()
    for i, c in enumerate(items):
        where = f"candidates[{i}]"
        name = _unique(c["name"] or f"candidate{i + 1}", names, where)
        x, y = _place(c, where)
        t0, t1 = _window(c, where, start, end, "start", "end")
        out.append(Candidate(name, x, y, t0, t1, c["radius"]))
    return out
