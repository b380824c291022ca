"""Building the run objects of a checked scenario table: releases, output grid, receptors,
dispersion, flow and ensemble specifications.
"""

from __future__ import annotations

import glob
import math
from datetime import datetime
from pathlib import Path
from typing import Any, Literal

import numpy as np

from walkers.errors import InputError
from walkers.scenario.config import (
    SEA_WATER_DENSITY,
    Dispersion,
    OutputGrid,
    Receptor,
    Release,
    Vertical,
)
from walkers.scenario.keys import MAX_OUTPUT_CELLS
from walkers.scenario.settling import stokes_settling_velocity
from walkers.scenario.specs import DispersionSpec, EnsembleSpec, FlowSpec, LayerSelection
from walkers.scenario.walk import _check_lonlat, _coordinate, _resolve_path, _seconds


def _build_releases(
    items: list[dict[str, Any]], start: datetime, end: datetime, geographic: bool
) -> list[Release]:
    run_length = _seconds(start, end)
    releases: list[Release] = []
    names: set[str] = set()
    for i, r in enumerate(items):
        where = f"releases[{i}]"
        name = r["name"] or f"release{i + 1}"
        if name in names:
            raise InputError(f"{where}.name = {name!r}: names must differ between releases")
        names.add(name)
        shape = r["shape"]
        coords = _release_positions(r, shape, where, geographic)
        t0 = _seconds(start, r["start"]) if r["start"] is not None else 0.0
        if not 0.0 <= t0 < run_length:
            raise InputError(
                f"{where}.start = {r['start'].isoformat()}: must lie in the run, from run.start "
                "(included) to run.end (excluded)"
            )
        duration, mass, rate_times, rates = _release_amount(r, where, start, t0)
        if t0 + duration > run_length + 1e-9:
            raise InputError(
                f"{where}: the release ends after run.end; shorten duration or extend run.end"
            )
        if not (math.isfinite(mass) and mass > 0):
            raise InputError(f"{where}: the released mass {mass!r} kg is not a finite number > 0")
        releases.append(
            Release(
                shape=shape,
                coords=np.asarray(coords, dtype=np.float64),
                particles=r["particles"],
                start=t0,
                duration=float(duration),
                mass=float(mass),
                radius=r["radius"] or 0.0,
                rate_times=rate_times,
                rates=rates,
                name=name,
                **_release_column(r, where),
            )
        )
    return releases


def _release_column(r: dict[str, Any], where: str) -> dict[str, Any]:
    """A release's behaviour in the water column (see :class:`Release`): its settling
    velocities (m s-1, > 0 down, < 0 rising) with their shares, and its start height."""
    out: dict[str, Any] = {
        "behaviour": r["behaviour"],
        "start_height": r["start_height"],
        "height_above_bed": r["height_above_bed"] or 0.0,
    }
    if r["behaviour"] == "rising":
        out["settling"] = (-r["rise_velocity"],)
    elif r["settling_velocity"] is not None:
        if r["fractions"] is not None:
            raise InputError(
                f"{where}.fractions: shares go with settling_velocities or grain_sizes, not with "
                "one settling_velocity; remove fractions or give a list of velocities"
            )
        out["settling"] = (r["settling_velocity"],)
    elif r["behaviour"] == "settling":
        key = "settling_velocities" if r["settling_velocities"] is not None else "grain_sizes"
        if r["fractions"] is None:
            raise InputError(
                f"{where}.{key}: give the share of the particles of each in fractions, e.g. "
                "fractions = [0.7, 0.3]"
            )
        if len(r["fractions"]) != len(r[key]):
            raise InputError(
                f"{where}.fractions: {len(r['fractions'])} fractions for {len(r[key])} "
                f"{key.replace('_', ' ')}; give one fraction for each"
            )
        total = sum(r["fractions"])
        if abs(total - 1.0) > 1e-6:
            raise InputError(
                f"{where}.fractions = {r['fractions']!r}: the shares must add up to 1 (they add "
                f"up to {total:.6g})"
            )
        if key == "grain_sizes":
            if not r["grain_density"] > SEA_WATER_DENSITY:
                raise InputError(
                    f"{where}.grain_density = {r['grain_density']:g} kg/m3: grains must be "
                    f"denser than sea water ({SEA_WATER_DENSITY:g} kg/m3) to settle; for a "
                    "buoyant release give behaviour = 'rising' and rise_velocity"
                )
            velocities = tuple(
                stokes_settling_velocity(d, r["grain_density"], f"{where}.grain_sizes[{i}]")
                for i, d in enumerate(r[key])
            )
        else:
            velocities = tuple(r[key])
        out["settling"] = velocities
        # the shares as given, rescaled to add up to 1 exactly
        out["settling_fractions"] = tuple(f / total for f in r["fractions"])
    return out


def _release_positions(
    r: dict[str, Any], shape: str, where: str, geographic: bool
) -> list[list[float]]:
    """A release's positions (one, a line's two ends or a polygon's vertices), checked against
    its shape."""
    if r["x"] is not None:
        coords = [
            [_coordinate(r["x"], f"{where}.x", False), _coordinate(r["y"], f"{where}.y", False)]
        ]
    elif r["lon"] is not None:
        _check_lonlat(r["lon"], r["lat"], where)
        coords = [[r["lon"], r["lat"]]]
    else:
        key = "points" if r["points"] is not None else "points_lonlat"
        coords = [
            [_coordinate(c, f"{where}.{key}[{j}]", geographic) for c in pair]
            for j, pair in enumerate(r[key])
        ]
    if geographic:
        for j, (lon, lat) in enumerate(coords):
            _check_lonlat(lon, lat, f"{where} position {j}")
    if shape in ("point", "circle") and len(coords) != 1:
        raise InputError(
            f"{where}: a {shape} release takes one position (x, y or lon, lat), not points"
        )
    if shape == "line" and len(coords) != 2:
        raise InputError(
            f"{where}: a line release takes its two ends in points = [[x1, y1], [x2, y2]]"
        )
    if shape == "line" and coords[0] == coords[1]:
        raise InputError(f"{where}.points: the two ends of a line must differ")
    if shape == "polygon":
        pts = np.asarray(coords)
        area = 0.5 * abs(
            np.dot(pts[:, 0], np.roll(pts[:, 1], 1)) - np.dot(pts[:, 1], np.roll(pts[:, 0], 1))
        )
        if len(coords) < 3 or not area > 0:
            raise InputError(
                f"{where}.points: a polygon release needs at least 3 vertices enclosing an area"
            )
    if shape == "circle" and r["radius"] is None:
        raise InputError(f'{where}: a circle release needs radius (a length, e.g. "50 m")')
    return coords


def _release_amount(
    r: dict[str, Any], where: str, start: datetime, t0: float
) -> tuple[float, float, np.ndarray | None, np.ndarray | None]:
    """A release's duration (s), mass (kg) and rate series (times s, rates kg/s; or None), from
    its mass, its constant rate or its rate series."""
    duration = r["duration"]
    rate_times = rates = None
    if r["mass"] is not None:
        duration = duration or 0.0
        mass = r["mass"]
    elif r["rate"] is not None:
        if not duration:
            raise InputError(
                f'{where}: a release given by rate needs duration > 0 (e.g. "2 h"); for an '
                "instantaneous release give mass"
            )
        mass = r["rate"] * duration
    else:
        if len(r["rate_times"]) != len(r["rates"]) or len(r["rates"]) < 2:
            raise InputError(
                f"{where}: rate_times and rates must be lists of the same length, at least 2 "
                f"(got {len(r['rate_times'])} and {len(r['rates'])})"
            )
        rate_times = np.array(
            [t0 + v if tag == "offset" else _seconds(start, v) for tag, v in r["rate_times"]]
        )
        rates = np.array(r["rates"], dtype=np.float64)
        if not np.all(np.diff(rate_times) > 0):
            raise InputError(f"{where}.rate_times: times must be strictly ascending")
        if rate_times[0] > t0 + 1e-9:
            raise InputError(
                f"{where}.rate_times: the first time must be at or before the release start"
            )
        if duration is None:
            duration = float(rate_times[-1] - t0)
        if t0 + duration > rate_times[-1] + 1e-9:
            raise InputError(
                f"{where}.duration: the rate series ends before the release does; extend "
                "rate_times or shorten duration"
            )
        mass = _integrate_rate(rate_times, rates, t0, t0 + duration)
        if not mass > 0:
            raise InputError(
                f"{where}.rates: the rates integrate to no mass over the release; give rates > 0"
            )
    return duration, mass, rate_times, rates


def _integrate_rate(times: np.ndarray, rates: np.ndarray, t0: float, t1: float) -> float:
    """Mass (kg) released by the piecewise-linear rate series between t0 and t1 (s)."""
    inner = times[(times > t0) & (times < t1)]
    t = np.concatenate([[t0], inner, [t1]])
    r = np.interp(t, times, rates)
    return float(np.sum(0.5 * (r[1:] + r[:-1]) * np.diff(t)))


def _build_output_grid(g: dict[str, Any], bandwidth: float, geographic: bool) -> OutputGrid:
    def coord(key: str) -> float:
        return _coordinate(g[key], f"output.grid.{key}", geographic)

    if g["cell_size"] is not None:
        dx = dy = coord("cell_size")
        size_key_x = size_key_y = "cell_size"
    else:
        dx, dy = coord("cell_size_x"), coord("cell_size_y")
        size_key_x, size_key_y = "cell_size_x", "cell_size_y"
    for value, key in ((dx, size_key_x), (dy, size_key_y)):
        if not value > 0:
            raise InputError(f"output.grid.{key} = {g[key]!r}: must be greater than 0")
    if g["west"] is not None:
        west, east, south, north = (coord(k) for k in ("west", "east", "south", "north"))
        if not (east > west and north > south):
            raise InputError(
                "output.grid: east must be greater than west and north greater than south"
            )
        fx, fy = (east - west) / dx, (north - south) / dy
        if not fx * fy <= MAX_OUTPUT_CELLS:
            raise InputError(
                f"output.grid: about {fx:.3g} x {fy:.3g} cells is more than "
                f"{MAX_OUTPUT_CELLS:.0e}; use larger cells or a smaller extent"
            )
        nx = math.ceil(fx - 1e-9)
        ny = math.ceil(fy - 1e-9)
        x0, y0 = west + 0.5 * dx, south + 0.5 * dy
    else:
        x0, y0 = coord("x_origin"), coord("y_origin")
        nx, ny = g["cells_x"], g["cells_y"]
    if nx * ny > MAX_OUTPUT_CELLS:
        raise InputError(
            f"output.grid: {nx} x {ny} cells is more than {MAX_OUTPUT_CELLS:.0e}; use larger "
            "cells or a smaller extent"
        )
    return OutputGrid(x0=x0, dx=dx, nx=nx, y0=y0, dy=dy, ny=ny, bandwidth=bandwidth)


def _build_receptors(items: list[dict[str, Any]]) -> list[Receptor]:
    receptors = []
    names: set[str] = set()
    for i, r in enumerate(items):
        where = f"receptors[{i}]"
        name = r["name"] or f"receptor{i + 1}"
        if name in names:
            raise InputError(f"{where}.name = {name!r}: names must differ between receptors")
        names.add(name)
        if r["x"] is not None:
            x = _coordinate(r["x"], f"{where}.x", False)
            y = _coordinate(r["y"], f"{where}.y", False)
        else:
            _check_lonlat(r["lon"], r["lat"], where)
            x, y = r["lon"], r["lat"]
        receptors.append(
            Receptor(
                name=name,
                x=x,
                y=y,
                radius=r["radius"],
                thresholds=tuple(r["thresholds"] or ()),
            )
        )
    return receptors


def _build_dispersion(d: dict[str, Any]) -> DispersionSpec:
    if d["method"] == "estimated":
        factor = 0.15 if d["channel"] == "straight" else 0.6
        return DispersionSpec(
            method="estimated",
            manning_n=d["manning_n"],
            drag_coefficient=d["drag_coefficient"],
            transverse_factor=factor,
            minimum=d["minimum"],
            multiplier=d["multiplier"],
        )
    mode: Literal["axes", "aligned"]
    if d["coefficient"] is not None:
        k1 = k2 = d["coefficient"]
        mode = "axes"
    elif d["longitudinal"] is not None:
        k1, k2, mode = d["longitudinal"], d["transverse"], "aligned"
    else:
        k1, k2, mode = d["along_x"], d["along_y"], "axes"
    return DispersionSpec(
        method="constant",
        constant=Dispersion(k1=k1, k2=k2, mode=mode, multiplier=d["multiplier"]),
        multiplier=d["multiplier"],
    )


def _build_vertical(v: dict[str, Any] | None, dispersion: DispersionSpec) -> Vertical | None:
    """The [vertical] table as a :class:`Vertical` (None: a depth-averaged run). A parabolic K_z
    takes its u* roughness from [vertical], or else from an estimated [dispersion]: one source."""
    if v is None:
        return None
    manning_n, drag = v["manning_n"], v["drag_coefficient"]
    needs_roughness = v["diffusivity"] == "parabolic" or v["critical_shear_stress"] is not None
    if manning_n is None and drag is None and dispersion.method == "estimated":
        # the one bed roughness of the run: u* of K_z and of resuspension, and z0 of the law of
        # the wall below the lowest layer centre of a layered velocity
        manning_n, drag = dispersion.manning_n, dispersion.drag_coefficient
    elif needs_roughness and manning_n is None and drag is None:
        raise InputError(
            f"vertical.diffusivity = {v['diffusivity']!r}: a parabolic K_z = 0.41 u* z "
            "(1 - z/h) or resuspension (tau = rho u*^2) needs the bed roughness for u*; give "
            "vertical.manning_n or vertical.drag_coefficient (or estimate [dispersion] with "
            "one, which [vertical] then uses)"
        )
    elif (manning_n is not None or drag is not None) and dispersion.method == "estimated":
        raise InputError(
            "vertical.manning_n / drag_coefficient: [dispersion] is estimated from a bed "
            "roughness already, which [vertical] uses for u*; give the roughness once, in "
            "[dispersion]"
        )
    if v["diffusivity"] == "constant" and v["coefficient"] is None:
        raise InputError(
            "vertical.coefficient: diffusivity = 'constant' needs K_z, e.g. coefficient = "
            '"0.01 m2/s"'
        )
    return Vertical(
        diffusivity=v["diffusivity"],
        coefficient=v["coefficient"] or 0.0,
        manning_n=manning_n,
        drag_coefficient=drag,
        deposition_velocity=v["deposition_velocity"] or 0.0,
        critical_shear_stress=v["critical_shear_stress"],
        erosion_rate=v["erosion_rate"] or 0.0,
        substep_fraction=v["substep_fraction"],
    )


def _is_file(path: Path) -> bool:
    try:
        return path.is_file()
    except OSError:
        return False


def _files_flow(f: dict[str, Any], base_dir: Path, start: datetime, end: datetime) -> FlowSpec:
    """The flow spec of flow files: paths (globs expanded, each file checked), CRS checked."""
    paths: list[Path] = []
    for i, name in enumerate(f["files"]):
        where = f"flow.files[{i}]" if len(f["files"]) > 1 else "flow.files"
        pattern = _resolve_path(name, base_dir, where)
        if any(c in name for c in "*?["):
            found = sorted(Path(p) for p in glob.glob(str(pattern)))
            if not found:
                raise InputError(f"{where} = {name!r}: no file matches {pattern}")
            paths.extend(found)
        elif not _is_file(pattern):
            raise InputError(
                f"{where} = {name!r}: no such file {pattern} (paths are relative to the "
                "scenario file)"
            )
        else:
            paths.append(pattern)
    crs = f["crs"]
    if crs is not None:
        import pyproj

        try:
            pyproj.CRS.from_user_input(crs)
        except pyproj.exceptions.CRSError:
            raise InputError(
                f"flow.crs = {crs!r}: not a coordinate reference system pyproj knows; give "
                'e.g. "EPSG:32631" or a WKT string'
            ) from None
    return FlowSpec(
        kind="files",
        paths=tuple(paths),
        variables={k: v for k, v in (f["variables"] or {}).items() if v is not None},
        units={k: v for k, v in (f["units"] or {}).items() if v is not None},
        crs=crs,
        min_depth=f["minimum_depth"],
        constant_depth=f["depth"],
        time_range=(start.isoformat(), end.isoformat()),
        layers=_layer_selection(f["layers"] or {}),
        velocity_axes=f["velocity_axes"] or "auto",
        open_boundaries=_open_boundaries(f["open_boundaries"] or []),
    )


def _open_boundaries(items: list[dict[str, Any]]) -> dict[str, dict[str, Any]]:
    """[[flow.open_boundaries]] as name -> {"nodes": [...]} or {"polyline": ..., "tolerance"}."""
    out: dict[str, dict[str, Any]] = {}
    for i, item in enumerate(items):
        name = item["name"]
        if name in out:
            raise InputError(
                f"flow.open_boundaries[{i}]: the name {name!r} is used twice; give each boundary "
                "its own name"
            )
        if item.get("nodes") is not None:
            out[name] = {"nodes": list(item["nodes"])}
        else:
            out[name] = {"polyline": item["polyline"], "tolerance": item["tolerance"]}
    return out


def _layer_selection(table: dict[str, Any]) -> LayerSelection:
    """The [flow.layers] table as a :class:`LayerSelection` (band depths in m)."""
    mode = table.get("select") or "mean"
    if mode == "band":
        band = table.get("band")
        if band is None:
            raise InputError(
                'flow.layers.band: select = "band" needs the band\'s top and bottom depths below '
                'the surface, e.g. band = ["0 m", "2 m"]'
            )
        top, bottom = (float(b) for b in band)
        if not bottom > top:
            raise InputError(
                f"flow.layers.band = [{top:g} m, {bottom:g} m]: the bottom must be deeper than "
                "the top (depths below the surface)"
            )
        return LayerSelection("band", band=(top, bottom))
    if mode == "layer":
        return LayerSelection("layer", layer=int(table.get("layer") or 1))
    return LayerSelection()


def _build_flow(
    f: dict[str, Any], base_dir: Path, start: datetime, end: datetime, duration: float
) -> FlowSpec:
    if f["files"] is not None:
        return _files_flow(f, base_dir, start, end)
    a = f["analytic"]
    west, east, south, north = a["extent"]
    nx, ny = a["cells"]
    if not (east > west and (north > south or a["dimensions"] == 1)):
        raise InputError(
            "flow.analytic.extent: give [west, east, south, north] with east > west and "
            "north > south"
        )
    if a["dimensions"] not in (1, 2):
        raise InputError(f"flow.analytic.dimensions = {a['dimensions']!r}: expected 1 or 2")
    if a["dimensions"] == 1 and a["area"] is None:
        raise InputError(
            "flow.analytic.area: a 1-D channel (dimensions = 1) needs its cross-section area, "
            'e.g. "120 m2"'
        )
    if nx < 2 or (a["dimensions"] == 2 and ny < 2) or nx * ny > MAX_OUTPUT_CELLS:
        raise InputError(
            f"flow.analytic.cells = {a['cells']!r}: need at least 2 cells along each axis and "
            f"at most {MAX_OUTPUT_CELLS:.0e} in all"
        )
    frames = duration / a["frame_interval"] if a["kind"] == "tidal" else 1
    if frames > 10**6:
        raise InputError(
            "flow.analytic.frame_interval: more than a million tidal frames; use a longer interval"
        )
    return FlowSpec(
        kind="analytic",
        analytic={
            "kind": a["kind"],
            "x_range": (west, east),
            "y_range": (south, north),
            "nx": nx,
            "ny": ny,
            "depth": a["depth"] if a["dimensions"] == 2 else a["area"],
            "u": a["u"],
            "v": a["v"],
            "shear": a["shear"],
            "angular_velocity": a["angular_velocity"],
            "amplitude": a["amplitude"],
            "period": a["period"],
            "duration": duration,
            "frame_interval": a["frame_interval"],
            "ndim": a["dimensions"],
        },
        time_origin=start.isoformat(),
    )


def _build_ensemble(
    e: dict[str, Any], releases: list[Release], start: datetime, run_length: float
) -> EnsembleSpec:
    names = [r.name for r in releases]
    if e["release"] is None:
        if len(releases) > 1:
            raise InputError(
                f"ensemble.release: missing; with several releases say which one varies "
                f"(one of {', '.join(names)})"
            )
        index = 0
    elif e["release"] in names:
        index = names.index(e["release"])
    else:
        raise InputError(
            f"ensemble.release = {e['release']!r}: no release of that name; expected one of "
            f"{', '.join(names)}"
        )
    fields: dict[str, Any] = {
        "members": e["members"],
        "release": names[index],
        "release_index": index,
    }
    if e["members"] > 10**6:
        raise InputError(f"ensemble.members = {e['members']}: at most 1000000")
    if e["start_earliest"] is not None:
        early = _seconds(start, e["start_earliest"])
        late = _seconds(start, e["start_latest"])
        if not 0 <= early < late < run_length:
            raise InputError(
                "ensemble.start_earliest/start_latest: need run.start <= earliest < latest < "
                "run.end"
            )
        fields.update(start="uniform", start_earliest=early, start_latest=late)
    elif e["start_sd"] is not None:
        fields.update(start="normal", start_sd=e["start_sd"])
    if e["location_sd"] is not None:
        fields.update(location="normal", location_sd=e["location_sd"])
    elif e["location_radius"] is not None:
        fields.update(location="uniform_circle", location_radius=e["location_radius"])
    if e["mass_median"] is not None:
        if not e["mass_spread"] >= 1:
            raise InputError(
                f"ensemble.mass_spread = {e['mass_spread']!r}: the spread factor exp(sigma) "
                "must be >= 1 (1 = no spread)"
            )
        fields.update(mass="lognormal", mass_median=e["mass_median"], mass_spread=e["mass_spread"])
    elif e["mass_min"] is not None:
        lo, mode, hi = e["mass_min"], e["mass_mode"], e["mass_max"]
        if not (lo <= mode <= hi and lo < hi):
            raise InputError(
                "ensemble.mass_min/mass_mode/mass_max: need mass_min <= mass_mode <= mass_max "
                "and mass_min < mass_max"
            )
        fields.update(mass="triangular", mass_min=lo, mass_mode=mode, mass_max=hi)
    for key in ("duration", "dispersion_multiplier"):
        lo, hi = e[f"{key}_min"], e[f"{key}_max"]
        if lo is not None:
            if not lo <= hi:
                raise InputError(f"ensemble.{key}_min: must not exceed {key}_max")
            fields[f"{key}_range"] = (lo, hi)
    fields["deposit_thresholds"] = tuple(sorted(set(e["deposit_thresholds"] or ())))
    return EnsembleSpec(**fields)
