"""Curvilinear grids: files written as boundary-fitted models write them, the grid kind's maps,
the index-space step against exact answers, bad input, and the demo.

Sources beside each check: the line vortex u_θ = Γ/r (Batchelor 1967, An Introduction to Fluid
Dynamics, from memory), elementary geometry (areas of quadrilaterals, chord sag), the method of
images and the Gaussian plume through walkers.verify (Carslaw & Jaeger 1959; Fischer et al. 1979),
CF-1.8 §5.2 and §7.1 and the CF standard name table (angle_of_rotation_from_east_to_x).
"""

from __future__ import annotations

import copy
import math
import sys
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from walkers.engine import mover
from walkers.engine.state import ParticleState
from walkers.errors import InputError
from walkers.fields.analytic import curvilinear_flow
from walkers.fields.grids import Curvilinear, corners_from_centres
from walkers.fields.netcdf.open import open_flow
from walkers.scenario.config import INDEX_EDGE_NAMES, Dispersion, Transport
from walkers.verify.checks import evolve

sys.path.insert(0, str(Path(__file__).parent))
from curvilinear_files import (  # noqa: E402
    centres_of,
    polar_corners,
    rotated_corners,
    write_curvilinear,
)

GAMMA = 500.0  # m2 s-1
R_FACES = np.linspace(500.0, 1500.0, 41)
D_THETA = math.radians(1.0)
THETA_FACES = np.arange(301) * D_THETA
SAG = 1.0 - math.cos(0.5 * D_THETA)  # chord sag / radius (elementary geometry)


def vortex(x, y):
    r2 = x * x + y * y
    return -GAMMA * y / r2, GAMMA * x / r2


def circle_errors(flow, t_end=1800.0):
    """Largest relative radius error and relative error of the angle travelled of points
    released on the cell-centre radii of the polar grid, carried by the flow alone (RK4)."""
    r0 = 0.5 * (R_FACES[:-1] + R_FACES[1:])
    th0 = math.radians(10.5)
    a, b = flow.grid.to_engine(r0 * math.cos(th0), r0 * math.sin(th0))
    a, b = mover.advect_points(flow, a, b, 0.0, t_end, 5.0, "rk4")
    x, y = flow.grid.to_physical(a, b)
    travelled = np.mod(np.arctan2(y, x) - th0, 2 * math.pi)
    want = GAMMA * t_end / r0**2
    return (
        float(np.max(np.abs(np.hypot(x, y) - r0) / r0)),
        float(np.max(np.abs(travelled - want) / want)),
    )


# Bounds (see walkers.verify.curvilinear.case_vortex): chords and sag.
RADIUS_BOUND = SAG
ANGLE_BOUND = D_THETA**2 / 24.0 + 3.0 * SAG


@pytest.mark.parametrize(
    "layout",
    [
        {},  # eastward/northward at cell centres, cell bounds given
        {"bounds": False},  # corners from the centres
        {"staggered": True},  # Arakawa C: along-axis components on the cell faces
        {"angle_variable": True},  # grid-axis components with the grid angle beside them
    ],
    ids=["centred", "no-bounds", "c-grid", "grid-angle"],
)
def test_free_vortex_paths_are_circles(tmp_path, layout):
    cx, cy = polar_corners(R_FACES, THETA_FACES)
    kwargs = dict(layout)
    override = None
    if kwargs.get("bounds") is False:
        # without bounds the corners come from the centres: give the centres on the circles so
        # that the derived corners are (to second order) those of the polar grid
        rc = 0.5 * (R_FACES[:-1] + R_FACES[1:])
        tc = 0.5 * (THETA_FACES[:-1] + THETA_FACES[1:])
        r, t = np.meshgrid(rc, tc)
        override = (r * np.cos(t), r * np.sin(t))
    path = write_curvilinear(
        tmp_path / "vortex.nc", cx, cy, vortex, centre_override=override, **kwargs
    )
    flow = open_flow(path)
    assert flow.curvilinear and flow.grid.shape == (300, 40)
    radius, angle = circle_errors(flow)
    # corners rebuilt from the centres are means of points on the circles: allow twice the bounds
    factor = 2.0 if override is not None else 1.0
    assert radius <= factor * RADIUS_BOUND, radius
    assert angle <= factor * ANGLE_BOUND, angle


def test_misread_components_bend_the_circles(tmp_path):
    """The twin: east/north components read as if along the grid axes leave the circles."""
    cx, cy = polar_corners(R_FACES, THETA_FACES)
    path = write_curvilinear(tmp_path / "vortex.nc", cx, cy, vortex)
    radius, angle = circle_errors(open_flow(path, velocity_axes="grid"))
    assert radius > 100 * RADIUS_BOUND or angle > 100 * ANGLE_BOUND


def test_index_maps_invert_each_other_and_areas_are_exact():
    """to_engine(to_physical(p)) = p inside every cell; cell areas are those of the polar
    quadrilaterals, ½ sin Δθ (r₂² − r₁²) (elementary geometry); points outside give NaN."""
    cx, cy = polar_corners(R_FACES, THETA_FACES)
    grid = Curvilinear(cx, cy)
    rng = np.random.default_rng(7)
    a = rng.uniform(-0.5, 39.5, 20000)
    b = rng.uniform(-0.5, 299.5, 20000)
    x, y = grid.to_physical(a, b)
    a2, b2 = grid.to_engine(x, y)
    assert np.max(np.abs(a2 - a)) < 1e-9 and np.max(np.abs(b2 - b)) < 1e-9
    # from a start cell far away, by walking
    a3, b3 = grid.to_engine(x[:50], y[:50], guess=(np.full(50, 20.0), np.full(50, 150.0)))
    assert np.max(np.abs(a3 - a[:50])) < 1e-9 and np.max(np.abs(b3 - b[:50])) < 1e-9
    r1, r2 = np.meshgrid(R_FACES[:-1], THETA_FACES[:-1])[0], np.meshgrid(R_FACES[1:], [0])[0]
    want = 0.5 * math.sin(D_THETA) * (r2**2 - r1**2)
    assert np.allclose(grid.cell_area(), want, rtol=1e-12)
    # the centre, beyond the outer radius, and in the gap of the sector (300° to 360°)
    out_a, _ = grid.to_engine(np.array([0.0, 3000.0, 866.0]), np.array([0.0, 0.0, -500.0]))
    assert np.all(np.isnan(out_a))


def test_compiled_step_equals_numpy_twin_on_a_curvilinear_grid():
    """The index-space step (full tensor K̃, drift from H = h|J|, walls, open edges) is the same
    in the compiled kernel and its numpy twin, to 1e-12."""
    cx, cy = rotated_corners(30, 20, 40.0, 25.0, math.radians(25.0))
    cx = cx + 3.0 * np.sin(cy / 50.0)  # not orthogonal, not uniform
    X, Y = centres_of(cx, cy)
    wet = np.ones((20, 30), dtype=bool)
    wet[8:10, 10:14] = False
    flow = curvilinear_flow(
        cx,
        cy,
        [0.0, 3600.0],
        lambda X, Y, t: (0.2 + 0 * X + 1e-5 * t, 0.05 + 0.0001 * X),
        depth=4.0 + 0.002 * X,
        wet=wet,
    )
    tr = Transport(
        dt=30.0,
        scheme="rk4",
        dispersion=Dispersion(mode="aligned", k1=3.0, k2=0.5),
        edges={"first_i": "absorbing", "last_i": "absorbing"},
    )
    rng = np.random.default_rng(3)
    n = 3000
    st = ParticleState.from_arrays(
        rng.uniform(0.0, 29.0, n), rng.uniform(0.0, 7.4, n), np.ones(n), np.zeros(n)
    )
    fast = evolve(flow, tr, st.copy(), 0.0, 3600.0, 11)
    ref = evolve(flow, tr, st.copy(), 0.0, 3600.0, 11, stepper="reference")
    assert np.array_equal(fast.status, ref.status)
    assert np.max(np.abs(fast.x - ref.x)) < 1e-12 and np.max(np.abs(fast.y - ref.y)) < 1e-12
    assert (fast.status > 3).any()  # some went out through an open edge


def test_edges_are_named_by_grid_index():
    cx, cy = rotated_corners(10, 10, 10.0, 10.0, 0.3)
    flow = curvilinear_flow(cx, cy, [0.0], lambda X, Y, t: (0 * X, 0 * X))
    tr = Transport(dt=1.0, edges={"west": "reflecting"})
    with pytest.raises(InputError, match=r"\[edges\] west: .*first_i \(faces .*name those"):
        mover.kernel_inputs(flow, flow.window(0.0, 0.0), tr)
    modes = mover.edge_modes(Transport(dt=1.0, edges={"last_j": "reflecting"}), flow)
    assert modes.tolist() == [1, 1, 1, 0]
    assert flow.kind().edge_names == INDEX_EDGE_NAMES


def test_nan_and_folded_coordinates_are_refused(tmp_path):
    cx, cy = rotated_corners(6, 5, 10.0, 10.0, 0.0)
    X, Y = centres_of(cx, cy)
    bad = X.copy()
    bad[2, 3] = np.nan
    path = write_curvilinear(
        tmp_path / "nan.nc",
        cx,
        cy,
        lambda x, y: (0 * x, 0 * x),
        bounds=False,
        centre_override=(bad, Y),
    )
    with pytest.raises(InputError, match=r"nan\.nc.*x_centre.*missing.*\(j=2, i=3\)"):
        open_flow(path)
    folded = X.copy()
    folded[:, 3] = X[:, 0]  # column 3 written where column 0 is: the grid turns back on itself
    path = write_curvilinear(
        tmp_path / "fold.nc",
        cx,
        cy,
        lambda x, y: (0 * x, 0 * x),
        bounds=False,
        centre_override=(folded, Y),
    )
    with pytest.raises(InputError, match=r"fold\.nc.*folded"):
        open_flow(path)
    with pytest.raises(InputError, match="folded"):
        Curvilinear(*corners_from_centres(folded, Y))


def test_east_north_components_on_faces_are_refused(tmp_path):
    cx, cy = polar_corners(R_FACES[:6], THETA_FACES[:6])
    path = write_curvilinear(tmp_path / "stag.nc", cx, cy, vortex, staggered=True)
    with pytest.raises(InputError, match=r"stag\.nc.*eastward/northward but lie on the cell faces"):
        open_flow(path, velocity_axes="east_north")


def test_lon_lat_grid_carries_a_uniform_current_its_distance(tmp_path):
    """A rotated lon/lat grid with a uniform eastward current of 0.5 m/s: after an hour a point
    has moved 1800 m east (WGS84 radius of curvature; Snyder 1987, eq. 4-18)."""
    from walkers.fields.geo import metres_per_degree

    lat0 = 48.0
    mx, my = (float(m[0]) for m in metres_per_degree(np.array([lat0])))
    cx, cy = rotated_corners(80, 80, 50.0, 50.0, math.radians(20.0), (-500.0, -2000.0))
    lon, lat = -3.0 + cx / mx, lat0 + cy / my
    path = write_curvilinear(
        tmp_path / "lonlat.nc", lon, lat, lambda x, y: (0.5 + 0 * x, 0 * x), geographic=True
    )
    flow = open_flow(path)
    assert flow.geographic and flow.curvilinear
    a, b = flow.grid.to_engine(np.array([-3.0]), np.array([lat0]))
    a, b = mover.advect_points(flow, a, b, 0.0, 3600.0, 60.0, "rk4")
    x, y = flow.grid.to_physical(a, b)
    east = (x[0] + 3.0) * mx
    north = (y[0] - lat0) * my
    # the grid is a bilinear image of lon/lat: the metric varies by (50 m / 6.4e6 m) per cell
    assert abs(east - 1800.0) < 1.0 and abs(north) < 1.0, (east, north)


def test_layered_curvilinear_demo_runs_and_closes_its_budget(tmp_path):
    """The demo's layered curvilinear file runs as shipped, the budget closes and its edges
    carry the grid's names; and its receptor peaks are of the order of the rectilinear demo's
    (the flow is interpolated from it, so they are close, not equal)."""
    from walkers.api import load_scenario, run_scenario

    here = Path(__file__).parents[1]
    scenario = load_scenario(here / "scenarios/saltmarsh_estuary_curvilinear.toml")
    out = run_scenario(scenario, output=tmp_path / "curv.nc")
    ds = out.results
    assert "first_j edge (faces south)" in out.summary and ds.attrs["grid_kind"] == "curvilinear"
    assert list(ds["edge"].values) == list(INDEX_EDGE_NAMES)
    assert ds["edge_faces"].values[0] == "west" and ds["edge_faces"].values[2] == "south"
    released = float(ds.budget_released[-1])
    parts = (
        float(ds.budget_in_water[-1])
        + float(ds.budget_outflow[:, -1].sum())
        + float(ds.budget_decayed[-1])
        + float(ds.budget_held_dry[-1])
    )
    assert abs(parts - released) < 1e-9 * released
    assert float(ds.budget_outflow.sel(edge="first_j")[-1]) > 0.0  # out to sea


def test_inspect_describes_the_grid_and_draws_it(tmp_path):
    from walkers.inspect import describe_flow, draw_speed_map

    demo = Path(__file__).parents[1] / "scenarios/saltmarsh_estuary_curvilinear_flow.nc"
    text = describe_flow(demo)
    assert "curvilinear (projected 2-D coordinates), 24 x 120 cells" in text
    assert "first_j faces south" in text and "last_j faces north" in text
    assert "eastward/northward (or projected x/y) at the cell centres" in text
    assert "ocean_sigma_coordinate" in text
    draw_speed_map(open_flow(demo), tmp_path / "map.png", frame=10)
    assert (tmp_path / "map.png").stat().st_size > 10_000


def test_time_step_check_counts_cells_along_the_grid_axes():
    """|u| dt against the cell side along u's axis (common practice, the Courant number): a
    current of 1 m/s along a rotated grid of 10 m by 40 m cells allows 10 s along i; the same
    current across the grid allows 40 s."""
    from walkers.engine.timestep import check_time_step

    cx, cy = rotated_corners(60, 30, 10.0, 40.0, math.radians(35.0))
    c, s = math.cos(math.radians(35.0)), math.sin(math.radians(35.0))
    for (ue, vn), longest in (((c, s), 10.0), ((-s, c), 40.0)):
        flow = curvilinear_flow(cx, cy, [0.0], lambda X, Y, t, u=ue, v=vn: (u + 0 * X, v + 0 * X))
        tr = Transport(dt=15.0, dispersion=Dispersion(k1=0.0, k2=0.0))
        report = check_time_step(flow, tr, 0.0, 0.0)
        assert math.isclose(report.longest_step(), longest, rel_tol=1e-9)
        assert report.ok == (15.0 <= longest)


def test_a_resumed_run_on_a_curvilinear_grid_is_bitwise_the_same():
    """Checkpoints keep the engine's (index-space) positions: resuming gives the same numbers."""

    from walkers.run.simulate import simulate
    from walkers.scenario.config import OutputGrid, Release

    cx, cy = polar_corners(R_FACES[:21], THETA_FACES[:61])
    flow = curvilinear_flow(cx, cy, [0.0], lambda X, Y, t: vortex(X, Y), depth=6.0)
    tr = Transport(
        dt=5.0,
        dispersion=Dispersion(k1=1.0, k2=1.0),
        edges=dict.fromkeys(INDEX_EDGE_NAMES, "reflecting"),
    )
    rel = [Release("point", np.array([[700.0, 300.0]]), 500, mass=1.0)]
    grid = OutputGrid(x0=0.0, dx=50.0, nx=21, y0=0.0, dy=50.0, ny=21)
    saved = []
    kwargs = dict(start=0.0, end=1200.0, output_interval=300.0, output_grid=grid, seed=5)
    full = simulate(flow, tr, rel, on_output=lambda rs: saved.append(copy.deepcopy(rs)), **kwargs)
    state = saved[1]
    again = simulate(flow, tr, rel, resume=state, **kwargs)
    assert np.array_equal(full.concentration.values, again.concentration.values)
    assert float(full.budget_in_water[-1]) > 0.0


def test_ensemble_runs_on_the_curvilinear_demo(tmp_path):
    """Members' sources are drawn in the world and checked against the grid's wet cells."""
    import tomllib

    from walkers.ensemble.execute import run_ensemble

    here = Path(__file__).parents[1] / "scenarios"
    table = tomllib.loads((here / "saltmarsh_ensemble.toml").read_text())
    table["flow"]["files"] = ["saltmarsh_estuary_curvilinear_flow.nc"]
    table["edges"] = {"first_j": "absorbing", "last_j": "absorbing"}
    table["run"]["start"] = "2026-05-04T03:00:00Z"
    table["run"]["end"] = "2026-05-04T09:00:00Z"
    table["ensemble"]["start_earliest"] = "2026-05-04T03:30:00Z"
    table["ensemble"]["start_latest"] = "2026-05-04T04:30:00Z"
    table["releases"][0]["particles"] = 300  # > kernels.BLOCK: blocks on threads, as in the demo
    table["output"]["file"] = str(tmp_path / "ens.nc")
    ds = run_ensemble(table, members=3, base_dir=here)
    assert int(ds.attrs.get("members", 3)) == 3
    probability = [v for v in ds.data_vars if "probab" in v]
    assert probability and float(ds[probability[0]].max()) > 0.0


def test_z_levels_on_a_lon_lat_curvilinear_grid_are_averaged_by_thickness(tmp_path):
    """z levels (depth, positive down, fill values below the bed) on a lon/lat curvilinear
    grid: the depth mean weights each level by its thickness (CF-1.8 §4.3), and the current it
    gives carries a point its distance (an eastward current, WGS84 radii, Snyder 1987)."""
    from walkers.fields.geo import metres_per_degree

    lat0 = 50.0
    mx, my = (float(m[0]) for m in metres_per_degree(np.array([lat0])))
    cx, cy = rotated_corners(40, 30, 60.0, 60.0, math.radians(15.0), (-600.0, -900.0))
    lon, lat = 2.0 + cx / mx, lat0 + cy / my
    path = write_curvilinear(
        tmp_path / "z.nc", lon, lat, lambda x, y: (0 * x, 0 * x), geographic=True
    )
    faces = np.array([0.0, 2.0, 5.0, 10.0])  # m below the surface
    speeds = np.array([0.9, 0.6, 0.3])  # m/s, eastward, in each level
    want = float(np.sum(speeds * np.diff(faces)) / 10.0)  # thickness-weighted: 0.48 m/s
    with netCDF4.Dataset(path, "a") as ds:
        ds.createDimension("z", 3)
        ds.createDimension("nb", 2)
        z = ds.createVariable("z", "f8", ("z",))
        z.standard_name, z.units, z.positive, z.axis = "depth", "m", "down", "Z"
        z.bounds = "z_bnds"
        z[:] = 0.5 * (faces[1:] + faces[:-1])
        zb = ds.createVariable("z_bnds", "f8", ("z", "nb"))
        zb[:] = np.stack([faces[:-1], faces[1:]], axis=1)
        ds["depth"][:] = 10.0
        for name, value in (("u", speeds), ("v", 0 * speeds)):
            ds.renameVariable(name, name + "_2d")
            var = ds.createVariable(name, "f8", ("time", "z", "j", "i"), fill_value=-9999.0)
            var.standard_name = ds[name + "_2d"].standard_name
            var.units, var.coordinates = "m s-1", "lon_centre lat_centre"
            var[:] = np.broadcast_to(value[None, :, None, None], (1, 3, 30, 40))
            del ds[name + "_2d"].standard_name
            ds[name + "_2d"].long_name = "unused"
            ds[name + "_2d"].units = "1"
    flow = open_flow(path, variables={"u": "u", "v": "v"})
    assert flow.curvilinear and flow.geographic
    a, b = flow.grid.to_engine(np.array([2.0]), np.array([lat0]))
    a, b = mover.advect_points(flow, a, b, 0.0, 1800.0, 60.0, "rk4")
    x, y = flow.grid.to_physical(a, b)
    assert abs((x[0] - 2.0) * mx - want * 1800.0) < 1.0
    assert abs((y[0] - lat0) * my) < 1.0
