"""The scenario file (TOML): parse, check at the door, and produce typed SI-unit run objects.

Every key the scenario file may hold is described once, as data, in
:data:`~walkers.scenario.schema.SCHEMA` (kind, units, default, whether required, allowed values,
help). :func:`load_scenario` walks a TOML file or a dict against it: unknown keys are rejected with
a "did you mean", values are converted to SI with :func:`walkers.scenario.units.parse_quantity`, and
every complaint is an :class:`~walkers.errors.InputError` that names the file, the key path (e.g.
``releases[0].mass``), the bad value and what is accepted. The reference page ``docs/scenario.md``
is generated from the same schema by :func:`~walkers.scenario.docs.schema_markdown`, so the
documentation and the validator cannot drift apart.

Times: ``run.start``/``run.end`` and release starts are ISO 8601 date-times with a zone. Inside the
returned :class:`Scenario` all release times are seconds relative to the run start.
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from datetime import datetime
from pathlib import Path
from typing import Any

from walkers.errors import InputError
from walkers.scenario.build import (
    _build_dispersion,
    _build_ensemble,
    _build_flow,
    _build_output_grid,
    _build_receptors,
    _build_releases,
    _build_vertical,
)
from walkers.scenario.column_output import build_column_output
from walkers.scenario.config import Dispersion, Transport, Vertical
from walkers.scenario.keys import MAX_PARTICLES
from walkers.scenario.schema import SCHEMA
from walkers.scenario.specs import DispersionSpec, Scenario
from walkers.scenario.walk import _geographic, _resolve_path, _seconds, _walk

# --------------------------------------------------------------------------------------------
# Public entry points.
# --------------------------------------------------------------------------------------------


def load_scenario(
    source: str | Path | dict[str, Any], *, base_dir: str | Path | None = None
) -> Scenario:
    """Read, check and convert a scenario (a TOML file path or an already-parsed dict).

    Parameters
    ----------
    source : path of a TOML scenario file, or a dict with the same structure.
    base_dir : directory against which relative paths (flow files, output file) are resolved;
        default the scenario file's directory, or the current directory for a dict.

    Returns
    -------
    Scenario, in SI units, release times in seconds from the run start.

    Raises
    ------
    InputError
        for anything wrong with the input, naming the file, the key path and what is accepted.
    """
    raw, label, stem, text, source_path, base = read_source(source, base_dir)
    try:
        return _build(raw, base, stem, text, source_path)
    except InputError as err:
        raise InputError(f"{label}: {err}") from None


def read_source(
    source: str | Path | dict[str, Any], base_dir: str | Path | None
) -> tuple[dict[str, Any], str, str, str | None, Path | None, Path]:
    """A scenario's raw table, its label for messages, its stem, its text (None for a dict), its
    file and the folder relative paths are resolved against."""
    text: str | None = None
    source_path: Path | None = None
    if isinstance(source, dict):
        raw = source
        label = "scenario"
        stem = "scenario"
    elif isinstance(source, str | Path):
        source_path = Path(source).expanduser().resolve()
        label = str(source)
        stem = source_path.stem
        try:
            text = source_path.read_text(encoding="utf-8")
        except FileNotFoundError:
            raise InputError(f"{label}: no such scenario file") from None
        except (OSError, UnicodeDecodeError) as err:
            raise InputError(f"{label}: cannot read the scenario file ({err})") from None
        try:
            raw = tomllib.loads(text)
        except tomllib.TOMLDecodeError as err:
            raise InputError(f"{label}: not valid TOML: {err}") from None
    else:
        raise InputError(f"scenario: expected a file path or a dict, got {type(source).__name__}")
    if base_dir is None:
        base = source_path.parent if source_path is not None else Path.cwd()
    else:
        base = Path(base_dir)
    return raw, label, stem, text, source_path, base


def _build(
    raw: dict[str, Any], base: Path, stem: str, text: str | None, source_path: Path | None
) -> Scenario:
    geographic = _geographic(raw)
    s = _walk(SCHEMA, raw, "")
    run = s["run"]
    start, end, run_length, dt, interval = _run_times(run)
    releases = _build_releases(s["releases"], start, end, geographic)
    _check_column_keys(raw, s)
    total = sum(r.particles for r in releases)
    if total > MAX_PARTICLES:
        raise InputError(f"releases: {total} particles in all; at most {MAX_PARTICLES:.0e} per run")
    if run["tracks"] > total:
        raise InputError(f"run.tracks = {run['tracks']}: more than the {total} particles released")
    if geographic and s["flow"]["analytic"] is not None:
        raise InputError(
            "flow.analytic: analytic flows are laid out in metres; give positions as x/y"
        )
    flow = _build_flow(s["flow"], base, start, end, run_length)
    if s["vertical"] is not None:
        flow = dataclasses.replace(flow, column=True)
    dispersion = _build_dispersion(s["dispersion"])
    base_transport, transport = _transports(s, run["scheme"], dt, dispersion)
    out = s["output"]
    grid = _build_output_grid(out["grid"], out["bandwidth"], geographic)
    receptors = _build_receptors(s["receptors"])
    output_path = _output_path(out["file"], stem, base, source_path)
    ensemble = (
        _build_ensemble(s["ensemble"], releases, start, run_length)
        if s["ensemble"] is not None
        else None
    )
    if ensemble is not None and ensemble.deposit_thresholds:
        _check_deposit_thresholds(base_transport.vertical)
    if ensemble is not None and ensemble.members * total > 10**11:
        raise InputError(
            f"ensemble.members = {ensemble.members}: with {total} particles per member this is "
            "more than 10^11 particles; use fewer members or particles"
        )
    return Scenario(
        title=run["title"] or stem,
        start_iso=start.isoformat(),
        end_iso=end.isoformat(),
        start=start,
        end=end,
        dt=dt,
        output_interval=interval,
        seed=run["seed"],
        substep=run["substep"],
        tracks=run["tracks"],
        transport=transport,
        dispersion=dispersion,
        releases=releases,
        output=grid,
        receptors=receptors,
        flow=flow,
        output_path=output_path,
        ensemble=ensemble,
        geographic=geographic,
        text=text,
        source_path=source_path,
        transport_base=base_transport,
        comment=run["comment"] or "",
        column_output=build_column_output(out, geographic),
    )


def _check_column_keys(raw: dict[str, Any], s: dict[str, Any]) -> None:
    """A release's place and motion in the water column apply to three-dimensional runs only;
    a three-dimensional run needs a flow with a water depth."""
    from walkers.scenario.schema_vertical import RELEASE_COLUMN_KEYS

    if s["vertical"] is not None:
        if s["flow"]["analytic"] is not None and s["flow"]["analytic"]["dimensions"] == 1:
            raise InputError(
                "vertical: a three-dimensional run needs a 2-D flow with a water depth; this "
                "1-D channel has a cross-section area instead (remove [vertical])"
            )
        return
    for i, item in enumerate(raw.get("releases") or []):
        given = [k for k in RELEASE_COLUMN_KEYS if isinstance(item, dict) and k in item]
        if given:
            raise InputError(
                f"releases[{i}].{given[0]}: applies to three-dimensional runs only; add a "
                "[vertical] section (vertical diffusivity and bed) or remove the key"
            )


def _check_deposit_thresholds(vertical: Vertical | None) -> None:
    """Deposit thresholds need a bed that keeps particles: a three-dimensional run whose bed
    deposits."""
    if vertical is None or not vertical.deposition_velocity > 0:
        where = "there is no [vertical] section" if vertical is None else "its bed does not deposit"
        raise InputError(
            f"ensemble.deposit_thresholds: {where}, so nothing ever lies on the bed; give a "
            '[vertical] section with bed = "depositing" and a deposition_velocity, or remove the '
            "key"
        )


def _run_times(run: dict[str, Any]) -> tuple[datetime, datetime, float, float, float]:
    """The run's start and end, its length, time step and output interval (s), checked against
    each other."""
    start, end = run["start"], run["end"]
    run_length = _seconds(start, end)
    if not run_length > 0:
        raise InputError(
            f"run.end = {end.isoformat()}: must be after run.start = {start.isoformat()}"
        )
    dt, interval = run["time_step"], run["output_interval"]
    if dt > run_length:
        raise InputError(f"run.time_step: {dt:g} s is longer than the run ({run_length:g} s)")
    if run_length / dt > 10**9:
        raise InputError(f"run.time_step: {dt:g} s makes more than 10^9 steps; use a longer one")
    if interval > run_length:
        raise InputError(
            f"run.output_interval: {interval:g} s is longer than the run ({run_length:g} s)"
        )
    ratio = interval / dt
    if abs(ratio - round(ratio)) > 1e-9 * max(ratio, 1.0) or round(ratio) < 1:
        raise InputError(
            f"run.output_interval = {interval:g} s is not a whole multiple of run.time_step = "
            f"{dt:g} s; choose e.g. {max(round(ratio), 1) * dt:g} s"
        )
    return start, end, run_length, dt, interval


def _transports(
    s: dict[str, Any], scheme: str, dt: float, dispersion: DispersionSpec
) -> tuple[Transport, Transport | None]:
    """The run's transport without a meaningful dispersion (zero coefficients), and with it when
    the dispersion is constant (None when it is estimated from the flow)."""
    decay = s["decay"] or {"rate": None, "half_life": None}
    if decay["half_life"] is not None:
        decay_rate = math.log(2.0) / decay["half_life"]
    else:
        decay_rate = decay["rate"] or 0.0
    # only the edges the scenario names (the others are absorbing): the flow's grid decides
    # which names apply (see walkers.engine.mover.edge_modes)
    edges = {name: mode for name, mode in (s["edges"] or {}).items() if mode is not None}
    base_transport = Transport(
        dt=dt,
        dispersion=Dispersion(k1=0.0, k2=0.0, multiplier=dispersion.multiplier),
        scheme=scheme,
        decay_rate=decay_rate,
        edges=dict(edges),
        vertical=_build_vertical(s.get("vertical"), dispersion),
    )
    transport = (
        dataclasses.replace(base_transport, dispersion=dispersion.constant)
        if dispersion.constant is not None
        else None
    )
    return base_transport, transport


def _output_path(file: str | None, stem: str, base: Path, source_path: Path | None) -> Path:
    """The output file (``<stem>.nc`` beside the scenario unless given), checked."""
    output_path = _resolve_path(file or f"{stem}.nc", base, "output.file")
    if output_path.suffix != ".nc":
        raise InputError(f"output.file = {str(output_path)!r}: the name must end in .nc")
    if source_path is not None and output_path.resolve() == source_path:
        raise InputError("output.file: would overwrite the scenario file itself")
    return output_path
