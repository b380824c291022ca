"""The engine's step on unstructured meshes (the mesh option of the one step loop) against
published answers, and its numpy twin. The point release and the well-mixed check on meshes are
verification cases (walkers.verify.mesh, run by tests/test_verification.py).

Sources: the Gaussian plume of a point release in uniform flow (Fischer et al. 1979, Mixing in
Inland and Coastal Waters, ch. 2, from memory), the method of images at a straight wall (Carslaw &
Jaeger 1959, Conduction of Heat in Solids, §2.2, from memory), the well-mixed condition (Hunter,
Craig & Phillips 1993, J. Comput. Phys. 106; Visser 1997, Mar. Ecol. Prog. Ser. 158, from
memory); Kolmogorov–Smirnov tests through scipy.stats at the 5-sigma level; tolerances of 5
standard errors of a mean (σ/√n) and of a normal variance (σ²√(2/(n−1))).
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from mesh_files import jittered_mesh
from scipy import stats

from walkers.engine import mover
from walkers.engine.mesh_inputs import locate_particles, mesh_kernel_inputs
from walkers.engine.randomness import run_streams
from walkers.engine.state import EXITED, IN_WATER, ParticleState
from walkers.fields.analytic import analytic_flow
from walkers.fields.mesh import MeshFlow, MeshVariable, build_geometry
from walkers.fields.mesh_field import mesh_field
from walkers.fields.mesh_open import coast_only, mark_nodes
from walkers.scenario.config import Dispersion, Transport

Z = 5.0
FIVE_SIGMA_P = 2.0 * stats.norm.sf(Z)


def steady_flow(g, u, v, depth, bounds=None, location="node"):
    n = g.nnode if location == "node" else g.nface
    return MeshFlow(
        g,
        np.array([0.0]),
        "seconds since 2026-01-01T00:00:00Z",
        "standard",
        MeshVariable(location, np.broadcast_to(u, (1, n)).astype(float)),
        MeshVariable(location, np.broadcast_to(v, (1, n)).astype(float)),
        MeshVariable("node", np.broadcast_to(depth, (1, g.nnode)).astype(float)),
        np.ones((1, g.nface), np.uint8),
        bounds or coast_only(g),
        source="test mesh",
    )


def run(mesh, transport, x0, y0, n, t_end, seed=20261202, stepper="fast", release=None):
    """Particles moved on a mesh flow through the engine's step (mover.advance)."""
    flow = mesh_field(mesh)
    state = ParticleState.from_arrays(
        np.broadcast_to(x0, n).astype(float),
        np.broadcast_to(y0, n).astype(float),
        np.ones(n),
        np.zeros(n) if release is None else release,
    )
    locate_particles(flow, state)
    key, _ = run_streams(seed)
    inputs = mesh_kernel_inputs(flow, flow.window(0.0, t_end), transport)
    steps = int(round(t_end / transport.dt))
    mover.advance(state, inputs, 0.0, transport.dt, steps, 0, key, stepper)
    return state, state.face


def test_compiled_step_equals_numpy_twin_on_a_mesh():
    """Node and face velocities, Euler and RK4, axes and flow-aligned K, a sloping bed (drift),
    a face that dries for a frame, releases inside steps and an open boundary: the compiled step
    and its twin give the same numbers, bit for bit."""
    x, y, faces = jittered_mesh(24, 16, 64, jitter=12, seed=5)
    g = build_geometry(x, y, faces, where="test")
    east = np.flatnonzero(g.node_x == g.node_x.max())
    bounds = mark_nodes(g, coast_only(g), "east", east[np.argsort(g.node_y[east])], where="t")
    times = np.array([0.0, 1800.0, 3600.0])
    wet = np.ones((3, g.nface), np.uint8)
    wet[1, :5] = 0
    for location in ("node", "face"):
        xx = g.node_x if location == "node" else g.centroid_x
        flow = MeshFlow(
            g,
            times,
            "seconds since 2026-01-01T00:00:00Z",
            "standard",
            MeshVariable(location, np.stack([0.3 + 1e-4 * xx * k for k in range(3)])),
            MeshVariable(location, np.stack([0.05 * np.sin(xx / 300.0)] * 3)),
            MeshVariable("node", np.stack([2.0 + 0.002 * g.node_x] * 3)),
            wet,
            bounds,
            source="test mesh",
        )
        for scheme, mode in (("euler", "axes"), ("rk4", "aligned")):
            tr = Transport(dt=40.0, scheme=scheme, dispersion=Dispersion(mode=mode, k1=3.0, k2=1.0))
            rng = np.random.default_rng(2)
            # 1000 particles: four blocks of kernels.BLOCK, spread over threads as in runs
            start = (rng.uniform(10, 1500, 1000), rng.uniform(10, 1000, 1000))
            release = rng.uniform(0, 600, 1000)
            a, fa = run(flow, tr, *start, 1000, 1800.0, release=release)
            b, fb = run(flow, tr, *start, 1000, 1800.0, release=release, stepper="reference")
            assert np.array_equal(a.status, b.status) and np.array_equal(fa, fb)
            assert np.max(np.abs(a.x - b.x)) < 1e-12 and np.max(np.abs(a.y - b.y)) < 1e-12
            assert (a.status == EXITED).sum() > 100  # through the open boundary "east" (index 0)


def test_a_mesh_and_the_rectilinear_grid_it_triangulates_give_the_same_plume():
    """The same release on a rectilinear grid and on a triangulation of its cells (every cell
    split in two, no jitter): centroids and variances agree within 5·√2 standard errors."""
    x, y, faces = jittered_mesh(60, 30, 50, jitter=0, seed=1, quad_every=0)
    g = build_geometry(x, y, faces, where="test")
    u, v, kx, ky, t_end, n = 0.25, 0.05, 2.0, 0.5, 3600.0, 20000
    mesh_state, _ = run(
        steady_flow(g, u, v, 6.0),
        Transport(dt=60.0, dispersion=Dispersion(k1=kx, k2=ky)),
        600.0,
        700.0,
        n,
        t_end,
    )
    rect = analytic_flow(
        "uniform",
        u=u,
        v=v,
        x_range=(25.0, 2975.0),
        y_range=(25.0, 1475.0),
        nx=60,
        ny=30,
        depth=6.0,
    )
    st = ParticleState.from_arrays(np.full(n, 600.0), np.full(n, 700.0), np.ones(n), np.zeros(n))
    key, _ = run_streams(7)
    tr = Transport(dt=60.0, dispersion=Dispersion(k1=kx, k2=ky))
    mover.advance(st, mover.kernel_inputs(rect, rect.window(0.0, t_end), tr), 0.0, 60.0, 60, 0, key)
    for axis, k in ((0, kx), (1, ky)):
        a = (mesh_state.x, mesh_state.y)[axis]
        b = (st.x, st.y)[axis]
        var = 2 * k * t_end
        assert abs(a.mean() - b.mean()) < Z * math.sqrt(2 * var / n)
        assert abs(a.var(ddof=1) - b.var(ddof=1)) < Z * math.sqrt(2.0) * var * math.sqrt(2 / n)


THETA = math.pi / 6


@pytest.mark.parametrize("wall", ["coast", "open"], ids=["reflecting", "twin-open"])
def test_release_beside_an_oblique_coast_follows_the_image_solution(wall):
    """A mesh turned 30°: particles released 10 m from its west coast, K = 1 m2/s, 10 steps of
    60 s (longer than 10 m each): their distance from the wall follows the method of images. The
    twin makes that wall an open boundary: particles leave, and those kept no longer fit."""
    x, y, faces = jittered_mesh(12, 12, 50, jitter=8, seed=12, quad_every=3)
    c, s = math.cos(THETA), math.sin(THETA)
    g = build_geometry(c * x - s * y, c * y + s * x, faces, where="test")
    normal = np.array([c, s])
    along = np.array([-s, c])
    bounds = None
    if wall == "open":
        west = np.flatnonzero(np.isclose(g.node_x * c + g.node_y * s, 0.0))
        order = np.argsort(g.node_x[west] * -s + g.node_y[west] * c)[::-1]
        bounds = mark_nodes(g, coast_only(g), "west", west[order], where="t")
    flow = steady_flow(g, 0.0, 0.0, 5.0, bounds)
    k, d0, t_end, n = 1.0, 10.0, 600.0, 20000
    start = 300.0 * along + d0 * normal
    st, _ = run(flow, Transport(dt=60.0, dispersion=Dispersion(k1=k, k2=k)), *start, n, t_end)
    kept = st.status == IN_WATER
    d = st.x[kept] * normal[0] + st.y[kept] * normal[1]
    spread = math.sqrt(2 * k * t_end)

    def cdf(v):
        return stats.norm.cdf((v - d0) / spread) - stats.norm.cdf((-v - d0) / spread)

    p = stats.kstest(d, cdf).pvalue
    assert (p > FIVE_SIGMA_P and kept.all()) == (wall == "coast")


def test_the_demo_mesh_scenario_runs_and_books_its_open_boundary(tmp_path):
    """Curlew Basin as shipped: the budget closes, the open boundary read from the file is
    booked by name, and a grid's [edges] or estimated dispersion on a mesh are refused."""
    from pathlib import Path

    from walkers.api import load_scenario, run_scenario
    from walkers.errors import InputError

    here = Path(__file__).parents[1] / "scenarios"
    import tomllib

    table = tomllib.loads((here / "curlew_basin.toml").read_text())
    table["releases"][0]["particles"] = 2000
    table["run"]["tracks"] = 0
    scenario = load_scenario(table, base_dir=here)
    out = run_scenario(scenario, output=tmp_path / "curlew.nc")
    ds = out.results
    assert list(ds["edge"].values) == ["saltmarsh_entrance"] and ds.attrs["grid_kind"] == "mesh"
    assert "out through open boundary saltmarsh_entrance (faces west)" in out.summary
    parts = (
        float(ds.budget_in_water[-1])
        + float(ds.budget_outflow[:, -1].sum())
        + float(ds.budget_decayed[-1])
        + float(ds.budget_held_dry[-1])
    )
    assert abs(parts - float(ds.budget_released[-1])) < 1e-9 * float(ds.budget_released[-1])
    assert float(ds.budget_outflow.sel(edge="saltmarsh_entrance")[-1]) > 0.0
    table["edges"] = {"west": "reflecting"}
    with pytest.raises(InputError, match=r"\[edges\] west: a mesh has no such edges"):
        run_scenario(load_scenario(table, base_dir=here), output=tmp_path / "again.nc")
    del table["edges"]
    table["dispersion"] = {"method": "estimated", "manning_n": 0.025}
    with pytest.raises(InputError, match="not available on unstructured meshes"):
        run_scenario(load_scenario(table, base_dir=here), output=tmp_path / "again2.nc")
    table["dispersion"] = {"method": "constant", "coefficient": "1 m2/s"}
    table["flow"]["open_boundaries"] = [
        {"name": "quay", "polyline": [[436700.0, 4934000.0], [436750.0, 4934000.0]]}
    ]
    with pytest.raises(InputError, match="does not lie on the mesh boundary"):
        run_scenario(load_scenario(table, base_dir=here), output=tmp_path / "again3.nc")


def test_a_run_resumed_on_a_mesh_gives_the_same_numbers():
    """A checkpoint keeps positions, not faces: the resumed run finds the faces again by the
    walk, and gives the same concentrations bit for bit (a tie on an edge, where the walk could
    pick another face, does not occur here)."""
    import dataclasses

    from walkers.run.simulate import simulate
    from walkers.scenario.config import OutputGrid, Release

    x, y, faces = jittered_mesh(24, 16, 64, jitter=12, seed=5)
    g = build_geometry(x, y, faces, where="test")
    flow = mesh_field(steady_flow(g, 0.1, 0.02, 1.0 + 3.0 * g.node_x / 1536.0))
    tr = Transport(dt=60.0, dispersion=Dispersion(k1=2.0, k2=2.0))
    rel = [Release("point", np.array([[500.0, 500.0]]), 2000, mass=1.0)]
    grid = OutputGrid(x0=16.0, dx=32.0, nx=48, y0=16.0, dy=32.0, ny=32)
    kwargs = dict(start=0.0, end=3600.0, output_interval=600.0, output_grid=grid, seed=9)
    saved = []
    full = simulate(flow, tr, rel, on_output=lambda rs: saved.append(copy.deepcopy(rs)), **kwargs)
    particles = saved[2].particles
    particles.face = None  # as read back from a checkpoint file
    again = simulate(
        flow, tr, rel, resume=dataclasses.replace(saved[2], particles=particles), **kwargs
    )
    assert np.array_equal(full.concentration.values, again.concentration.values)
    assert float(full.budget_in_water[-1]) > 0.0


def test_an_ensemble_runs_on_the_demo_mesh():
    """Members' release places are drawn in the world and checked against the wet faces."""
    import tomllib
    from pathlib import Path

    from walkers.ensemble.execute import run_ensemble

    here = Path(__file__).parents[1] / "scenarios"
    table = tomllib.loads((here / "curlew_basin.toml").read_text())
    table["run"]["end"] = "2026-05-04T08:00:00Z"
    table["run"]["tracks"] = 0
    table["releases"][0]["particles"] = 300
    table["ensemble"] = {
        "members": 3,
        "release": "boatyard slip",
        "start_earliest": "2026-05-04T02:00:00Z",
        "start_latest": "2026-05-04T03:00:00Z",
        "location_sd": "10 m",
        "mass_median": "50 kg",
        "mass_spread": 2.0,
    }
    ds = run_ensemble(table, members=3, base_dir=here)
    probability = [v for v in ds.data_vars if "probab" in v]
    assert probability and float(ds[probability[0]].max()) > 0.0


def test_a_lon_lat_mesh_takes_lon_lat_places_and_moves_in_metres(tmp_path):
    """A mesh written in longitude/latitude: the scenario's release is in degrees, the engine
    moves particles in the reader's local metres, and the results come back in degrees. A
    uniform eastward current of 0.3 m/s for an hour carries the plume's centre 1080 m east: in
    degrees, 1080 m over the parallel's radius N(φ) cos φ (Snyder 1987, eq. 4-20; through
    walkers.fields.geo.metres_per_degree), within 5 standard errors of the mean."""
    from mesh_files import write_ugrid

    from walkers.api import load_scenario, simulate_scenario
    from walkers.fields.geo import metres_per_degree

    x, y, faces = jittered_mesh(40, 20, 100, jitter=15, seed=3)
    lat0, lon0 = 48.5, -4.0
    mx, my = (float(m[0]) for m in metres_per_degree(np.array([lat0])))
    lon, lat = lon0 + (x - 2000.0) / mx, lat0 + (y - 1000.0) / my
    n = x.size
    path = write_ugrid(
        tmp_path / "lonlat.nc",
        lon,
        lat,
        faces,
        geographic=True,
        fields={
            "u": ("node", np.full((1, n), 0.3)),
            "v": ("node", np.zeros((1, n))),
            "depth": ("node", np.full((1, n), 5.0)),
        },
    )
    table = {
        "run": {
            "start": "2026-06-01T00:00:00Z",
            "end": "2026-06-01T01:00:00Z",
            "time_step": "60 s",
            "output_interval": "1 h",
        },
        "flow": {"files": [str(path)]},
        "dispersion": {"method": "constant", "coefficient": "1 m2/s"},
        "releases": [
            {"shape": "point", "lon": -4.0, "lat": 48.5, "mass": "1 kg", "particles": 4000}
        ],
        "output": {
            "grid": {
                "west": -4.02,
                "east": -3.96,
                "south": 48.49,
                "north": 48.51,
                "cell_size": 0.001,
            }
        },
    }
    ds = simulate_scenario(load_scenario(table, base_dir=tmp_path))
    assert ds.attrs["grid_kind"] == "mesh" and int(ds.attrs["geographic"]) == 1
    east = (float(ds.centroid_x[-1]) - lon0) * mx
    north = (float(ds.centroid_y[-1]) - lat0) * my
    se = math.sqrt(2 * 1.0 * 3600.0 / 4000)
    assert abs(east - 1080.0) < Z * se + 1.0 and abs(north) < Z * se + 1.0, (east, north)
