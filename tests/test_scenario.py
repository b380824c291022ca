"""The scenario file: parsing into SI run objects, checks at the door, template and reference page.

Outside references used here: ISO 8601 date-times (Python's datetime.fromisoformat), first-order
decay k = ln 2 / T (common practice), the trapezoidal rule for a piecewise-linear rate (exact for
such a rate; common practice), Elder 1959 and Fischer et al. 1979 ch. 5 for estimated dispersion
(see tests/test_coefficients.py for the formulas and their hand values).
"""

import copy
import math
import re
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from walkers.engine.dispersion import transport_for
from walkers.errors import InputError
from walkers.fields.scenario_flow import build_flow, check_flow
from walkers.scenario.docs import schema_markdown, template_text
from walkers.scenario.keys import MAX_PARTICLES
from walkers.scenario.load import load_scenario
from walkers.scenario.schema import SCHEMA
from walkers.scenario.specs import EnsembleSpec, Scenario

REPO = Path(__file__).resolve().parents[1]


def base() -> dict:
    """A small valid scenario: analytic uniform flow in an invented creek."""
    return {
        "run": {
            "start": "2026-05-04T06:00:00Z",
            "end": "2026-05-04T18:00:00Z",
            "time_step": "60 s",
            "output_interval": "30 min",
        },
        "flow": {
            "analytic": {
                "kind": "uniform",
                "u": "0.3 m/s",
                "depth": "6 m",
                "extent": ["0 km", "10 km", "-1 km", "1 km"],
                "cells": [101, 21],
            }
        },
        "dispersion": {"longitudinal": "5 m2/s", "transverse": "0.5 m2/s"},
        "releases": [{"name": "spill", "x": "2 km", "y": 0, "mass": "500 kg", "particles": 1000}],
        "output": {
            "grid": {
                "west": 0,
                "east": "10 km",
                "south": "-1 km",
                "north": "1 km",
                "cell_size": "100 m",
            }
        },
        "receptors": [{"name": "intake", "x": "6 km", "y": "200 m", "thresholds": ["1 mg/L"]}],
    }


def load(data: dict, base_dir: Path | str = "/nonexistent/scenarios") -> Scenario:
    """Load a dict; relative paths resolve against ``base_dir`` (only the output path here)."""
    return load_scenario(data, base_dir=base_dir)


# ---------------------------------------------------------------------------------------------
# Template and reference page
# ---------------------------------------------------------------------------------------------


def test_template_is_accepted_unchanged(tmp_path):
    path = tmp_path / "creek.toml"
    path.write_text(template_text(), encoding="utf-8")
    sc = load_scenario(path)
    assert sc.text == template_text()
    assert sc.source_path == path.resolve()
    assert sc.output_path == tmp_path / "creek.nc"
    assert sc.releases[0].mass == 500.0 and sc.releases[0].radius == 50.0
    assert sc.releases[0].start == 3600.0 and sc.releases[0].duration == 3600.0
    assert sc.transport is not None and sc.transport.decay_rate == pytest.approx(
        math.log(2) / (2 * 86400.0)
    )
    assert sc.receptors[0].thresholds == pytest.approx((1e-4, 1e-3))
    flow = build_flow(sc.flow)
    check_flow(sc, flow)
    assert flow.time_units == "seconds since 2026-05-04T06:00:00+00:00"


def test_template_ensemble_block_loads_when_uncommented(tmp_path):
    keys = "members|release =|start_earliest|start_latest|location_sd|mass_median|mass_spread"
    text = re.sub(rf"^# (\[ensemble\]|{keys})", r"\1", template_text(), flags=re.M)
    path = tmp_path / "ensemble.toml"
    path.write_text(text, encoding="utf-8")
    e = load_scenario(path).ensemble
    assert (e.members, e.release, e.start, e.start_latest) == (
        200,
        "berth 3 spill",
        "uniform",
        10800.0,
    )
    assert (e.location, e.location_sd, e.mass, e.mass_median) == (
        "normal",
        100.0,
        "lognormal",
        500.0,
    )


def test_template_file_is_the_shipped_package_data():
    assert (REPO / "walkers" / "scenario" / "template.toml").read_text(
        encoding="utf-8"
    ) == template_text()
    assert "#" in template_text()


def test_reference_page_is_generated_from_the_schema():
    # docs/scenario.md is written by schema_markdown(); the two must never drift apart.
    assert (REPO / "docs" / "scenario.md").read_text(encoding="utf-8") == schema_markdown()


def test_reference_page_lists_every_key():
    page = schema_markdown()

    def keys(section, path=""):
        for name, spec in section.keys.items():
            if hasattr(spec, "keys"):
                yield from keys(spec, f"{path}.{name}" if path else name)
            else:
                yield name

    for name in keys(SCHEMA):
        assert f"`{name}`" in page


# ---------------------------------------------------------------------------------------------
# Conversions to SI and typed objects
# ---------------------------------------------------------------------------------------------


def test_base_scenario_in_si_units():
    sc = load(base())
    assert sc.dt == 60.0 and sc.output_interval == 1800.0 and sc.duration == 43200.0
    assert sc.start == datetime(2026, 5, 4, 6, tzinfo=UTC)
    assert sc.start_iso == "2026-05-04T06:00:00+00:00"
    assert sc.seed == 0 and sc.tracks == 0 and not sc.substep
    t = sc.transport
    assert t is not None
    assert (t.dt, t.scheme, t.decay_rate) == (60.0, "euler", 0.0)
    assert t.edges == {}  # edges not named are absorbing (walkers.engine.mover.edge_modes)
    d = t.dispersion
    assert (d.k1, d.k2, d.mode, d.multiplier) == (5.0, 0.5, "aligned", 1.0)
    rel = sc.releases[0]
    assert rel.shape == "point" and rel.coords.tolist() == [[2000.0, 0.0]]
    assert (rel.start, rel.duration, rel.mass, rel.particles) == (0.0, 0.0, 500.0, 1000)
    g = sc.output
    assert (g.x0, g.dx, g.nx, g.y0, g.dy, g.ny) == (50.0, 100.0, 100, -950.0, 100.0, 20)
    assert sc.receptors[0].x == 6000.0 and sc.receptors[0].thresholds == (1e-3,)
    assert sc.ensemble is None and not sc.geographic and sc.text is None
    assert sc.output_path == Path("/nonexistent/scenarios/scenario.nc")


def test_release_times_are_seconds_from_run_start_whatever_the_zone():
    data = base()
    # 09:00+02:00 is 07:00Z, one hour after the run start.
    data["releases"][0]["start"] = "2026-05-04T09:00:00+02:00"
    assert load(data).releases[0].start == 3600.0


def test_toml_native_date_times_are_accepted(tmp_path):
    text = (REPO / "walkers" / "scenario" / "template.toml").read_text(encoding="utf-8")
    text = text.replace('start = "2026-05-04T06:00:00Z"', "start = 2026-05-04T06:00:00Z")
    path = tmp_path / "native.toml"
    path.write_text(text, encoding="utf-8")
    assert load_scenario(path).start == datetime(2026, 5, 4, 6, tzinfo=UTC)


def test_half_life_and_rate_give_the_decay_rate():
    data = base()
    data["decay"] = {"half_life": "12 h"}
    assert load(data).transport.decay_rate == pytest.approx(math.log(2) / 43200.0, rel=1e-12)
    data["decay"] = {"rate": "1e-5 1/s"}
    assert load(data).transport.decay_rate == 1e-5


def test_constant_rate_release_mass_is_rate_times_duration():
    data = base()
    del data["releases"][0]["mass"]
    data["releases"][0].update(rate="3 t/h", duration="2 h")
    rel = load(data).releases[0]
    assert rel.mass == pytest.approx(6000.0) and rel.duration == 7200.0


def test_rate_series_with_offsets():
    data = base()
    del data["releases"][0]["mass"]
    data["releases"][0].update(
        start="2026-05-04T07:00:00Z",
        rate_times=["0 h", "1 h", "3 h"],
        rates=["2 kg/s", "4 kg/s", "0 kg/s"],
    )
    rel = load(data).releases[0]
    np.testing.assert_array_equal(rel.rate_times, [3600.0, 7200.0, 14400.0])
    np.testing.assert_array_equal(rel.rates, [2.0, 4.0, 0.0])
    # Trapezoidal rule, exact for a piecewise-linear rate: 0.5*(2+4)*3600 + 0.5*(4+0)*7200.
    assert rel.mass == pytest.approx(25200.0) and rel.duration == 10800.0


def test_rate_series_with_iso_times_and_shorter_duration():
    data = base()
    del data["releases"][0]["mass"]
    data["releases"][0].update(
        rate_times=["2026-05-04T06:00:00Z", "2026-05-04T08:00:00Z"],
        rates=["1 kg/s", "3 kg/s"],
        duration="1 h",
    )
    rel = load(data).releases[0]
    np.testing.assert_array_equal(rel.rate_times, [0.0, 7200.0])
    # Rate at 1 h is 2 kg/s: mass 0.5*(1+2)*3600.
    assert rel.mass == pytest.approx(5400.0)


def test_shapes_line_polygon_circle():
    data = base()
    data["releases"] = [
        {"shape": "line", "points": [[0, 0], ["1 km", "100 m"]], "mass": 1, "particles": 10},
        {"shape": "polygon", "points": [[0, 0], [100, 0], [0, 100]], "mass": 1, "particles": 10},
        {"shape": "circle", "x": 10, "y": 20, "radius": "50 m", "mass": 1, "particles": 10},
    ]
    line, poly, circle = load(data).releases
    assert line.coords.tolist() == [[0.0, 0.0], [1000.0, 100.0]]
    assert poly.coords.shape == (3, 2)
    assert circle.radius == 50.0 and circle.coords.tolist() == [[10.0, 20.0]]
    assert [r.name for r in (line, poly, circle)] == ["release1", "release2", "release3"]


def test_output_grid_from_origin_and_counts():
    data = base()
    data["output"]["grid"] = {
        "x_origin": "25 m",
        "y_origin": "-975 m",
        "cells_x": 400,
        "cells_y": 80,
        "cell_size_x": "50 m",
        "cell_size_y": "25 m",
    }
    data["output"]["bandwidth"] = "75 m"
    g = load(data).output
    assert (g.x0, g.y0, g.nx, g.ny, g.dx, g.dy, g.bandwidth) == (
        25.0,
        -975.0,
        400,
        80,
        50.0,
        25.0,
        75.0,
    )


def test_geographic_positions_in_degrees(tmp_path):
    data = base()
    data["releases"][0] = {"lon": 3.21, "lat": 51.4, "mass": "1 t", "particles": 10}
    data["receptors"] = [{"lon": 3.3, "lat": 51.45}]
    data["output"]["grid"] = {
        "west": 3.0,
        "east": 3.5,
        "south": 51.2,
        "north": 51.6,
        "cell_size": "0.01 deg",
    }
    data["flow"] = {"files": "flow.nc"}
    (tmp_path / "flow.nc").touch()
    sc = load(data, base_dir=tmp_path)
    assert sc.geographic
    assert sc.releases[0].coords.tolist() == [[3.21, 51.4]]
    assert sc.output.nx == 50 and sc.output.ny == 40
    assert sc.receptors[0].x == 3.3


def test_flow_files_relative_to_scenario_and_passed_to_the_reader(tmp_path, monkeypatch):
    (tmp_path / "flow").mkdir()
    for name in ("b.nc", "a.nc"):
        (tmp_path / "flow" / name).touch()
    data = base()
    data["flow"] = {
        "files": "flow/*.nc",
        "variables": {"u": "ucur", "depth": "h"},
        "units": {"u": "cm/s"},
        "crs": "EPSG:32631",
        "minimum_depth": "20 cm",
    }
    sc = load_scenario(data, base_dir=tmp_path)
    assert sc.flow.paths == (tmp_path / "flow" / "a.nc", tmp_path / "flow" / "b.nc")
    captured = {}

    def fake_open_flow(paths, **kw):
        captured.update(kw, paths=paths)
        return "flow"

    import walkers.fields.netcdf.open

    monkeypatch.setattr(walkers.fields.netcdf.open, "open_flow", fake_open_flow)
    assert build_flow(sc.flow) == "flow"
    assert captured["paths"] == [str(tmp_path / "flow" / "a.nc"), str(tmp_path / "flow" / "b.nc")]
    assert captured["variables"] == {"u": "ucur", "depth": "h"}
    assert captured["units"] == {"u": "cm/s"}
    assert captured["crs"] == "EPSG:32631" and captured["min_depth"] == pytest.approx(0.2)
    assert captured["constant_depth"] is None
    assert captured["time_range"] == ("2026-05-04T06:00:00+00:00", "2026-05-04T18:00:00+00:00")


def test_estimated_dispersion_on_uniform_flow_matches_elder_and_fischer():
    data = base()
    data["dispersion"] = {"method": "estimated", "manning_n": 0.025, "multiplier": 2.0}
    sc = load(data)
    assert sc.transport is None
    t = transport_for(sc, build_flow(sc.flow))
    # Hand value: h = 6 m, |U| = 0.3 m/s, n = 0.025: u* = n |U| sqrt(g) / h^(1/6);
    # K_L = 5.93 h u* (Elder 1959), K_T = 0.6 h u* (Fischer et al. 1979, ch. 5).
    u_star = 0.025 * 0.3 * math.sqrt(9.80665) / 6 ** (1 / 6)
    d = t.dispersion
    assert d.mode == "aligned" and d.multiplier == 2.0
    np.testing.assert_allclose(d.k1_field, 5.93 * 6 * u_star, rtol=1e-12)
    np.testing.assert_allclose(d.k2_field, 0.6 * 6 * u_star, rtol=1e-12)
    assert t.dt == 60.0


def test_estimated_dispersion_on_tidal_flow_is_the_time_mean():
    data = base()
    data["run"]["end"] = "2026-05-04T18:25:12Z"  # one period of 12.42 h
    data["flow"]["analytic"] = {
        "kind": "tidal",
        "amplitude": "1 m/s",
        "depth": "4 m",
        "frame_interval": "12.42 min",
        "cells": [5, 5],
    }
    data["dispersion"] = {"method": "estimated", "drag_coefficient": 0.0025, "channel": "straight"}
    sc = load(data)
    flow = build_flow(sc.flow)
    d = transport_for(sc, flow).dispersion
    # u* = sqrt(Cd) |U| is linear in |U|: the mean K over the frames uses the mean of
    # |cos(2 pi t / T)| over the frame times (computed here directly from the frame times).
    mean_speed = np.mean(np.abs(np.cos(2 * np.pi * flow.times / 44712.0)))
    np.testing.assert_allclose(d.k1_field, 5.93 * 4 * 0.05 * mean_speed, rtol=1e-12)
    np.testing.assert_allclose(d.k2_field, 0.15 * 4 * 0.05 * mean_speed, rtol=1e-12)


def test_ensemble_spec():
    data = base()
    data["ensemble"] = {
        "members": 50,
        "start_earliest": "2026-05-04T06:00:00Z",
        "start_latest": "2026-05-04T09:00:00Z",
        "location_radius": "200 m",
        "mass_min": "100 kg",
        "mass_mode": "500 kg",
        "mass_max": "2 t",
        "duration_min": "0 h",
        "duration_max": "2 h",
        "dispersion_multiplier_min": 0.5,
        "dispersion_multiplier_max": 2.0,
    }
    e = load(data).ensemble
    assert e == EnsembleSpec(
        members=50,
        release="spill",
        release_index=0,
        start="uniform",
        start_earliest=0.0,
        start_latest=10800.0,
        location="uniform_circle",
        location_radius=200.0,
        mass="triangular",
        mass_min=100.0,
        mass_mode=500.0,
        mass_max=2000.0,
        duration_range=(0.0, 7200.0),
        dispersion_multiplier_range=(0.5, 2.0),
    )
    data["ensemble"] = {"members": 3, "mass_median": "1 t", "mass_spread": 2.0, "start_sd": "1 h"}
    e = load(data).ensemble
    assert (e.mass, e.mass_median, e.mass_spread, e.start, e.start_sd) == (
        "lognormal",
        1000.0,
        2.0,
        "normal",
        3600.0,
    )


def test_analytic_one_dimensional_channel_uses_the_area():
    data = base()
    data["flow"]["analytic"] = {
        "kind": "uniform",
        "u": "0.2 m/s",
        "dimensions": 1,
        "area": "120 m2",
        "extent": ["0 m", "10 km", "0 m", "0 m"],
        "cells": [101, 1],
    }
    data["output"]["grid"] = {
        "west": 0,
        "east": "10 km",
        "south": -0.5,
        "north": 0.5,
        "cell_size_x": "100 m",
        "cell_size_y": 1,
    }
    data["receptors"] = []
    sc = load(data)
    flow = build_flow(sc.flow)
    assert flow.ndim == 1 and float(flow.depth.data[0, 0, 0]) == 120.0
    check_flow(sc, flow)


def test_release_outside_the_flow_domain_is_refused_against_the_flow():
    data = base()
    data["releases"][0]["x"] = "50 km"
    sc = load(data)
    with pytest.raises(InputError, match=r"releases\[0\] \(spill\): position outside"):
        check_flow(sc, build_flow(sc.flow))


# ---------------------------------------------------------------------------------------------
# Bad input: every message names the key and says what is accepted.
# ---------------------------------------------------------------------------------------------


def _set(data, path, value):
    *parents, last = path
    node = data
    for p in parents:
        node = node[p]
    if value is DELETE:
        del node[last]
    else:
        node[last] = value


DELETE = object()

BAD_CASES = [
    # (id, [(path, value), ...], substrings every one of which the message must hold)
    (
        "misspelled key",
        [(("run", "time_stpe"), "60 s")],
        ["run.time_stpe", "did you mean 'time_step'"],
    ),
    ("misspelled section", [(("relases",), [])], ["relases", "did you mean 'releases'"]),
    (
        "wrong dimension",
        [(("releases", 0, "mass"), "500 m")],
        ["releases[0].mass", "'500 m'", "kg, g"],
    ),
    (
        "negative mass",
        [(("releases", 0, "mass"), "-5 kg")],
        ["releases[0].mass", "'-5 kg'", "greater than 0"],
    ),
    (
        "end before start",
        [(("run", "end"), "2026-05-04T05:00:00Z")],
        ["run.end", "after run.start"],
    ),
    ("missing start", [(("run", "start"), DELETE)], ["run.start", "required", "ISO 8601"]),
    (
        "wrong type",
        [(("releases", 0, "particles"), "many")],
        ["releases[0].particles", "whole number"],
    ),
    (
        "float particles",
        [(("releases", 0, "particles"), 10.5)],
        ["releases[0].particles", "whole number"],
    ),
    (
        "rate and half-life",
        [(("decay",), {"rate": "1e-5 1/s", "half_life": "12 h"})],
        ["decay", "only one of rate | half_life"],
    ),
    (
        "circle without radius",
        [(("releases", 0, "shape"), "circle")],
        ["releases[0]", "radius", "50 m"],
    ),
    (
        "radius on a point",
        [(("releases", 0, "radius"), "50 m")],
        ["releases[0].radius", "shape = 'circle'"],
    ),
    ("start without zone", [(("run", "start"), "2026-05-04T06:00:00")], ["run.start", "zone", "Z"]),
    ("not a date", [(("run", "start"), "tomorrow")], ["run.start", "ISO 8601"]),
    (
        "interval not a multiple",
        [(("run", "output_interval"), "25 min"), (("run", "time_step"), "7 min")],
        ["run.output_interval", "whole multiple", "run.time_step"],
    ),
    ("bad scheme", [(("run", "scheme"), "rk5")], ["run.scheme", "did you mean 'rk4'", "'euler'"]),
    ("bad edge", [(("edges",), {"east": "open"})], ["edges.east", "'absorbing', 'reflecting'"]),
    (
        "mass and rate",
        [(("releases", 0, "rate"), "5 kg/s")],
        ["releases[0]", "only one of mass | rate | rate_times + rates"],
    ),
    (
        "rate without duration",
        [(("releases", 0, "mass"), DELETE), (("releases", 0, "rate"), "5 kg/s")],
        ["releases[0]", "duration > 0"],
    ),
    (
        "rate_times without rates",
        [(("releases", 0, "mass"), DELETE), (("releases", 0, "rate_times"), ["0 h", "1 h"])],
        ["releases[0]", "rate_times needs rates"],
    ),
    (
        "too many particles",
        [(("releases", 0, "particles"), MAX_PARTICLES + 1)],
        ["releases", "at most 1e+08"],
    ),
    (
        "release before run",
        [(("releases", 0, "start"), "2026-05-03T06:00:00Z")],
        ["releases[0].start", "run.start"],
    ),
    ("release after the end", [(("releases", 0, "duration"), "13 h")], ["releases[0]", "run.end"]),
    (
        "missing flow file",
        [(("flow",), {"files": "nowhere/flow.nc"})],
        ["flow.files", "no such file", "relative to the scenario file"],
    ),
    ("files and analytic", [(("flow", "files"), "x.nc")], ["flow", "only one of files | analytic"]),
    (
        "no dispersion coefficient",
        [(("dispersion",), {"multiplier": 2.0})],
        ["dispersion", "give one of coefficient | longitudinal + transverse | along_x + along_y"],
    ),
    (
        "estimated without roughness",
        [(("dispersion",), {"method": "estimated"})],
        ["dispersion", "manning_n | drag_coefficient"],
    ),
    (
        "constant key with estimated",
        [(("dispersion", "method"), "estimated"), (("dispersion", "manning_n"), 0.02)],
        ["dispersion.longitudinal", "method = 'constant'"],
    ),
    (
        "half a pair",
        [(("dispersion", "transverse"), DELETE)],
        ["dispersion", "longitudinal needs transverse"],
    ),
    (
        "mixed lon/lat and x/y",
        [(("receptors", 0), {"lon": 3.0, "lat": 51.0})],
        ["receptors[0] uses lon/lat", "releases[0] uses x/y"],
    ),
    (
        "threshold units",
        [(("receptors", 0, "thresholds"), ["1 kg"])],
        ["receptors[0].thresholds[0]", "mg/L"],
    ),
    (
        "ensemble window reversed",
        [
            (
                ("ensemble",),
                {
                    "members": 5,
                    "start_earliest": "2026-05-04T09:00:00Z",
                    "start_latest": "2026-05-04T07:00:00Z",
                },
            )
        ],
        ["ensemble.start_earliest", "earliest < latest"],
    ),
    (
        "ensemble release unknown",
        [(("ensemble",), {"members": 5, "release": "leak"})],
        ["ensemble.release", "'leak'", "spill"],
    ),
    (
        "triangular out of order",
        [(("ensemble",), {"members": 5, "mass_min": "2 t", "mass_mode": "1 t", "mass_max": "3 t"})],
        ["ensemble.mass_min", "mass_mode"],
    ),
    ("tracks over particles", [(("run", "tracks"), 5000)], ["run.tracks", "1000 particles"]),
    (
        "line with one point",
        [(("releases", 0), {"shape": "line", "points": [[0, 0]], "mass": 1, "particles": 5})],
        ["releases[0]", "two ends"],
    ),
    (
        "duplicate names",
        [(("releases",), [base()["releases"][0], base()["releases"][0]])],
        ["releases[1].name", "must differ"],
    ),
    ("no releases", [(("releases",), [])], ["releases", "at least one [[releases]]"]),
    ("no output grid", [(("output",), {})], ["output.grid", "required"]),
    ("negative seed", [(("run", "seed"), -1)], ["run.seed", "0 or greater"]),
    ("boolean as text", [(("run", "substep"), "yes")], ["run.substep", "true or false"]),
    (
        "flow units of the wrong kind",
        [(("flow",), {"files": "flow.nc", "units": {"u": "m"}})],
        ["flow.units.u", "velocity", "m/s"],
    ),
    (
        "unknown flow role",
        [(("flow",), {"files": "flow.nc", "variables": {"speed": "s"}})],
        ["flow.variables.speed", "u, v, depth"],
    ),
    (
        "crs unknown",
        [(("flow",), {"files": "flow.nc", "crs": "EPSG:9999999"})],
        ["flow.crs", "EPSG:32631"],
    ),
    ("table expected", [(("run",), "today")], ["run", "expected a table"]),
    (
        "array of tables expected",
        [(("releases",), {"x": 1})],
        ["releases", "array of tables", "[[releases]]"],
    ),
    (
        "rate series not ascending",
        [
            (("releases", 0, "mass"), DELETE),
            (("releases", 0, "rate_times"), ["0 h", "2 h", "1 h"]),
            (("releases", 0, "rates"), ["1 kg/s", "1 kg/s", "1 kg/s"]),
        ],
        ["releases[0].rate_times", "ascending"],
    ),
    (
        "polygon without area",
        [
            (
                ("releases", 0),
                {"shape": "polygon", "points": [[0, 0], [1, 1], [2, 2]], "mass": 1, "particles": 5},
            )
        ],
        ["releases[0].points", "at least 3 vertices"],
    ),
    (
        "degrees on a projected grid",
        [(("output", "grid", "cell_size"), "0.01 deg")],
        ["output.grid.cell_size", "unknown unit 'deg'", "km"],
    ),
]


@pytest.mark.parametrize(
    ("changes", "expected"), [c[1:] for c in BAD_CASES], ids=[c[0] for c in BAD_CASES]
)
def test_bad_input_names_key_and_what_is_accepted(changes, expected, tmp_path):
    (tmp_path / "flow.nc").touch()
    data = base()
    for path, value in changes:
        _set(data, path, value if value is DELETE else copy.deepcopy(value))
    with pytest.raises(InputError) as err:
        load(data, base_dir=tmp_path)
    msg = str(err.value)
    assert msg.startswith("scenario: ")
    for part in expected:
        assert part in msg, f"{part!r} not in {msg!r}"


def test_bad_value_in_a_file_names_the_file(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(template_text().replace('mass = "500 kg"', 'mass = "500 kgs"'))
    with pytest.raises(InputError, match=r"bad\.toml: releases\[0\]\.mass = '500 kgs'.*kg"):
        load_scenario(path)


def test_malformed_toml_names_file_and_line(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text('[run]\ntitle = "a"\nstart = 2026-05-04T06:00:00Z\nend = "unclosed\n')
    with pytest.raises(InputError, match=r"broken\.toml: not valid TOML.*line 4"):
        load_scenario(path)


def test_missing_scenario_file(tmp_path):
    with pytest.raises(InputError, match="no such scenario file"):
        load_scenario(tmp_path / "none.toml")


# ---------------------------------------------------------------------------------------------
# Only InputError escapes, whatever the input.
# ---------------------------------------------------------------------------------------------

scalars = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(10**30), max_value=10**30),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=12),
    st.sampled_from(
        [
            "500 kg",
            "-3 h",
            "1e400 m",
            "nan m",
            "2 m2/s",
            "0 s",
            "5 kg/s",
            "1 mg/L",
            "2026-05-04T07:00:00Z",
            "2026-05-04T07:00:00",
            "9999-12-31T23:59:59+14:00",
            "circle",
            "polygon",
            "line",
            "estimated",
            "tidal",
            "rk4",
            "reflecting",
            "0.01 deg",
            "~nouser/x.nc",
            "*.nc",
            "a\x00b",
            "EPSG:4326",
        ]
    ),
    st.datetimes(timezones=st.just(UTC)),
)


def _containers(inner):
    keys = st.sampled_from(["x", "y", "lon", "lat", "mass", "kind"])
    return st.one_of(st.lists(inner, max_size=4), st.dictionaries(keys, inner, max_size=3))


values = st.recursive(scalars, _containers, max_leaves=8)


def _paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, (*prefix, i))


KEY_NAMES = [
    "start",
    "end",
    "mass",
    "rate",
    "shape",
    "radius",
    "points",
    "lon",
    "lat",
    "x",
    "y",
    "half_life",
    "method",
    "manning_n",
    "files",
    "ensemble",
    "members",
    "decay",
    "rate_times",
    "rates",
    "duration",
    "cells",
    "extent",
    "dimensions",
    "area",
    "cell_size",
    "west",
    "x_origin",
    "tracks",
    "thresholds",
    "release",
    "bogus",
]


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_random_changes_raise_only_input_error(data):
    scenario = base()
    for _ in range(data.draw(st.integers(1, 4))):
        paths = list(_paths(scenario))[1:]
        path = data.draw(st.sampled_from(paths))
        action = data.draw(st.sampled_from(["replace", "delete", "add"]))
        parent = scenario
        for p in path[:-1]:
            parent = parent[p]
        if action == "replace":
            parent[path[-1]] = data.draw(values)
        elif action == "delete":
            del parent[path[-1]]
        elif isinstance(parent[path[-1]], dict):
            parent[path[-1]][data.draw(st.sampled_from(KEY_NAMES))] = data.draw(values)
    try:
        sc = load(scenario)
    except InputError:
        event("refused with InputError")
        return
    event("accepted")
    assert isinstance(sc, Scenario)


@settings(max_examples=200, deadline=None)
@given(text=st.text(max_size=200))
def test_random_text_raises_only_input_error(tmp_path_factory, text):
    path = tmp_path_factory.mktemp("random") / "random.toml"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    with pytest.raises(InputError):
        load_scenario(path)


def test_random_toml_of_the_template_lines_raise_only_input_error(tmp_path):
    # Every single-line deletion of the template either loads or raises InputError.
    lines = template_text().splitlines()
    for i in range(len(lines)):
        text = "\n".join(lines[:i] + lines[i + 1 :])
        path = tmp_path / f"cut{i}.toml"
        path.write_text(text, encoding="utf-8")
        try:
            load_scenario(path)
        except InputError:
            pass
