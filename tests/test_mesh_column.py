"""Three-dimensional runs on unstructured meshes (walkers.run.column with a mesh flow): the
vertical step in each face's column, with depth and u* per face, through the run's driver
(walkers.run.simulate), against published results.

Sources: the well-mixed condition of the vertical walk (Visser 1997, "Using random walk models to
simulate the vertical distribution of particles in a turbulent water column", Mar. Ecol. Prog.
Ser. 158, 275-281); the first-order law of deposition from a well-mixed column, 1 − exp(−w_d t /
h) (common practice; the slab series of Carslaw & Jaeger 1959, Conduction of Heat in Solids,
§3.11, from memory, bounds its gap); the exponential profile exp(−w_s z / K) of settling against
constant diffusion (Rouse 1937 with K constant, from memory); the bed shear velocity
u* = sqrt(C_d) |U| and u* = n |U| sqrt(g) / h^(1/6) (common practice); for layered files, the
logarithmic law of the wall and CF-1.8 Appendix D's ocean_sigma_coordinate. Tolerances: 5 binomial
standard errors, 5 standard errors of a mean, χ² and Kolmogorov–Smirnov tests at the 5σ level;
each check has a twin that fails. The compiled step against its numpy twin on a mesh, with and
without layered velocities, is in tests/test_vertical.py.

The runs reuse the step's option sets that tests/test_vertical.py (parabolic K_z on a mesh) and
tests/test_mesh_step.py (a depth-averaged mesh run) compile; the constant-K_z runs add one.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from mesh_files import jittered_mesh, write_ugrid
from scipy import integrate, stats
from test_vertical import exponential_cdf, slab_fraction_left

from walkers.engine import vertical
from walkers.engine.mesh_inputs import mesh_kernel_inputs
from walkers.engine.state import IN_WATER, ON_BED
from walkers.fields.mesh import MeshFlow, MeshVariable, build_geometry
from walkers.fields.mesh_field import mesh_field
from walkers.fields.mesh_open import coast_only
from walkers.fields.netcdf.ugrid import open_mesh_flow
from walkers.run import column
from walkers.run.simulate import released_particles, simulate
from walkers.scenario.config import Dispersion, OutputGrid, Release, Transport, Vertical

FIVE_SIGMA = 2.0 * stats.norm.sf(5.0)
CELL = 200.0  # m: 24 x 16 jittered cells of 200 m (512 triangles, 128 quadrilaterals)
GRID = OutputGrid(x0=100.0, dx=200.0, nx=24, y0=100.0, dy=200.0, ny=16)
SPEED = 0.5  # m s-1 along x
MANNING = 0.025  # s m^-1/3


def mesh_flow(depth):
    """A steady mesh flow of SPEED along x (on the nodes), depth a function of the node x (m),
    coast all round."""
    x, y, faces = jittered_mesh(24, 16, CELL, jitter=40.0, seed=5)
    g = build_geometry(x, y, faces, where="test")
    mesh = MeshFlow(
        g,
        np.array([0.0]),
        "seconds since 2026-01-01T00:00:00Z",
        "standard",
        MeshVariable("node", np.full((1, g.nnode), SPEED)),
        MeshVariable("node", np.zeros((1, g.nnode))),
        MeshVariable("node", np.broadcast_to(depth(g.node_x), (1, g.nnode)).copy()),
        np.ones((1, g.nface), np.uint8),
        coast_only(g),
        source="test mesh",
    )
    return mesh_field(mesh), g


def sloping(x):
    return 3.0 + 0.001 * x  # m: 3 m at the west coast, 7.8 m at the east


def corner_mean(g, node_values):
    """Each face's mean of its corners' values, computed here from the face-node table."""
    used = g.face_nodes >= 0
    picked = np.where(used, node_values[np.maximum(g.face_nodes, 0)], 0.0)
    return picked.sum(axis=1) / used.sum(axis=1)


def run(flow, transport, release, end, interval=None, seed=11):
    """simulate() from 0 to ``end`` s; (result, particles at the last output)."""
    last = {}
    ds = simulate(
        flow,
        transport,
        [release],
        start=0.0,
        end=end,
        output_interval=interval or end,
        output_grid=GRID,
        seed=seed,
        on_output=lambda rs: last.update(particles=rs.particles.copy()),
    )
    return ds, last["particles"]


def point(n, **column_keys):
    return Release("point", np.array([[600.0, 1600.0]]), n, mass=1.0, **column_keys)


# ---------------------------------------------------------------------------------------------
# The column's inputs on a mesh


def test_bed_shear_velocity_per_face_follows_the_roughness_laws():
    """u* per face: sqrt(C_d) |U| with a drag coefficient, n |U| sqrt(g) / h^(1/6) with Manning's
    n and h the face's corner mean of the node depths (common practice; g = 9.81 m s-2). The
    twin: the Manning law with the deepest node's depth instead does not match."""
    flow, g = mesh_flow(sloping)
    window = flow.window(0.0, 0.0)
    drag = column.cell_shear_velocity(flow, window, Vertical(drag_coefficient=0.0025))
    assert drag.shape == (1, 1, g.nface)
    np.testing.assert_allclose(drag[0, 0], 0.05 * SPEED, rtol=1e-12)
    manning = column.cell_shear_velocity(flow, window, Vertical(manning_n=MANNING))
    h = corner_mean(g, sloping(g.node_x))
    expect = MANNING * SPEED * math.sqrt(9.81) / h ** (1.0 / 6.0)
    np.testing.assert_allclose(manning[0, 0], expect, rtol=1e-3)  # g to three digits
    deepest = np.max(np.where(g.face_nodes >= 0, sloping(g.node_x)[g.face_nodes], 0.0), axis=1)
    wrong = MANNING * SPEED * math.sqrt(9.81) / deepest ** (1.0 / 6.0)
    assert not np.allclose(manning[0, 0], wrong, rtol=1e-3)
    np.testing.assert_allclose(column.column_depth(flow, window)[0, 0], h, rtol=1e-12)


def test_particles_start_at_their_height_above_the_bed_of_their_face():
    """A release 1 m above the bed on a sloping bed: sigma = 1 m / the depth of each particle's
    face (the column the step walks in). The twin: the depth at the release centre for all."""
    flow, g = mesh_flow(sloping)
    rel = Release(
        "circle",
        np.array([[1500.0, 1600.0]]),
        400,
        radius=900.0,
        start_height="above_bed",
        height_above_bed=1.0,
    )
    tr = Transport(dt=30.0, vertical=Vertical(manning_n=MANNING))
    p, _ = released_particles([rel], flow, np.random.default_rng(3), tr)
    h = corner_mean(g, sloping(g.node_x))[p.face]
    assert np.ptp(h) > 1.0  # the release spans columns of different depths
    np.testing.assert_allclose(p.sigma, 1.0 / h, rtol=1e-12)
    assert not np.allclose(p.sigma, 1.0 / sloping(1500.0), rtol=1e-3)


# ---------------------------------------------------------------------------------------------
# Well mixed under a parabolic K_z (Visser 1997)


def without_vertical_drift(monkeypatch):
    """The twin's walk: the vertical step without its drift dK_z/dz."""
    plain = vertical.column_params

    def no_drift(*args, **kwargs):
        params = plain(*args, **kwargs)
        params[vertical.P_DRIFT] = 0.0
        return params

    monkeypatch.setattr(vertical, "column_params", no_drift)


@pytest.mark.parametrize("drift", [True, False])
def test_well_mixed_release_stays_well_mixed_on_a_mesh(drift, monkeypatch):
    """Particles spread uniformly over the column, carried at 0.5 m/s over a bed sloping from
    3.6 to 5.4 m, K_z parabolic with u* from Manning's n per face (0.030-0.032 m/s): after 3600 s
    (1.3 to 2.2 mixing times 6 h / (κ u*)) their heights are still uniform, χ² over 20 bins of
    2000 at the 5σ level. The twin without the drift dK_z/dz gathers them at the bed and the
    surface and fails."""
    if not drift:
        without_vertical_drift(monkeypatch)
    flow, _ = mesh_flow(sloping)
    tr = Transport(
        dt=30.0, dispersion=Dispersion(k1=1.0, k2=1.0), vertical=Vertical(manning_n=MANNING)
    )
    _, p = run(flow, tr, point(2000, start_height="column"), 3600.0)
    assert np.all(p.status == IN_WATER)
    counts = np.histogram(p.sigma, bins=20, range=(0.0, 1.0))[0]
    pvalue = stats.chisquare(counts).pvalue
    assert (pvalue > FIVE_SIGMA) == drift, pvalue


# ---------------------------------------------------------------------------------------------
# The depth mean of a 3-D run is the depth-averaged run


def flat_and_deep(flat_flow, deep_flow, settling, n, t, roughness=None):
    """A depth-averaged run on ``flat_flow`` and a 3-D run on ``deep_flow`` of n particles from
    the same point for t seconds, K = 1 m2/s, parabolic K_z with the bed ``roughness`` (keys of
    ``Vertical``; default Manning's n = MANNING): a neutral release spread over the column, or
    (``settling``) one settling at 5 mm/s over a bed depositing at 2 mm/s. Returns (2-D result,
    2-D particles, 3-D particles)."""
    k = Dispersion(k1=1.0, k2=1.0)
    flat, flat_p = run(flat_flow, Transport(dt=30.0, dispersion=k), point(n), t)
    roughness = roughness or {"manning_n": MANNING}
    if settling:
        rel = point(n, behaviour="settling", settling=(0.005,), start_height="column")
        bed = Vertical(deposition_velocity=0.002, **roughness)
    else:
        rel, bed = point(n, start_height="column"), Vertical(**roughness)
    _, deep_p = run(deep_flow, Transport(dt=30.0, dispersion=k, vertical=bed), rel, t)
    return flat, flat_p, deep_p


@pytest.mark.parametrize("settling", [False, True])
def test_neutral_three_dimensional_run_moves_as_the_depth_averaged_run(settling):
    """With the depth-averaged velocity at every height a neutral 3-D release goes where the
    depth-averaged release goes: centroid within 5 standard errors (σ_x / √n) after 3600 s (its
    paths are in fact the same to the bit: the vertical step draws from a stream of its own).
    The twin, a settling release over a depositing bed (w_s 5 mm/s, w_d 2 mm/s), leaves particles
    behind on the bed and fails."""
    flow, _ = mesh_flow(sloping)
    n, t = 2000, 3600.0
    flat, flat_p, deep_p = flat_and_deep(flow, flow, settling, n, t)
    # the centroid of all the mass, in the water and on the bed (equal masses)
    se = float(np.std(flat_p.x, ddof=1)) / math.sqrt(n)
    gap = abs(float(np.mean(deep_p.x)) - float(np.mean(flat_p.x)))
    assert (gap < 5.0 * se) != settling, (gap, se)
    if not settling:
        assert float(flat.centroid_x[-1]) == pytest.approx(600.0 + SPEED * t, abs=5.0 * se)
        np.testing.assert_array_equal(deep_p.x, flat_p.x)
        np.testing.assert_array_equal(deep_p.y, flat_p.y)
    else:
        assert np.mean(deep_p.status == ON_BED) > 0.5


# ---------------------------------------------------------------------------------------------
# Deposition and settling with a constant K_z


def level(x):
    return np.full_like(np.asarray(x, dtype=np.float64), 2.0)  # m: a flat bed 2 m down


@pytest.mark.parametrize("factor", [1.0, 1.0 / math.sqrt(math.pi)])
def test_deposit_on_a_mesh_follows_the_first_order_law(factor):
    """h = 2 m, K_z = 0.01 m2/s, w_d = 10⁻⁴ m/s (w_d h / K = 0.02) while the release drifts
    across the mesh at 0.5 m/s with K = 1 m2/s: after h ln 2 / w_d (13 860 s) half the mass is
    on the bed. 3000 particles: 5 binomial standard errors plus the gap between the first-order
    law and the slab series (0.2 %). The twin, w_d off by 1/√π, fails."""
    flow, _ = mesh_flow(level)
    h, kz, wd = 2.0, 0.01, 1e-4
    tr = Transport(
        dt=10.0,
        dispersion=Dispersion(k1=1.0, k2=1.0),
        vertical=Vertical("constant", coefficient=kz, deposition_velocity=wd * factor),
    )
    n, t = 3000, 13860.0
    ds, p = run(flow, tr, Release("point", np.array([[400.0, 1600.0]]), n), t)
    on_bed = float(ds.budget_on_bed[-1] / ds.budget_released[-1])
    assert np.all(p.sigma[p.status == ON_BED] == 0.0)
    law = 1.0 - math.exp(-wd * t / h)
    exact = 1.0 - slab_fraction_left(kz, h, wd, t)
    tol = 5.0 * math.sqrt(law * (1.0 - law) / n) + abs(exact - law)
    assert (abs(on_bed - law) < tol) == (factor == 1.0), (on_bed, law, tol)


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_settling_on_a_mesh_reaches_the_exponential_profile(sign):
    """Settling at 2 mm/s in 10 m of water with K_z = 0.01 m2/s, released 2 m above the bed:
    after 5000 s (5.4 times the slowest relaxation time 1 / (K π² / h² + w_s² / 4K)) the heights
    follow exp(−w_s z / K), KS test of 3000 heights at the 5σ level; the twin, the profile of
    the opposite sign, is refused."""
    flow, _ = mesh_flow(lambda x: np.full_like(x, 10.0))
    kz, ws = 0.01, 0.002
    tr = Transport(
        dt=5.0,
        dispersion=Dispersion(k1=1.0, k2=1.0),
        vertical=Vertical("constant", coefficient=kz),
    )
    rel = point(
        3000, behaviour="settling", settling=(ws,), start_height="above_bed", height_above_bed=2.0
    )
    _, p = run(flow, tr, rel, 5000.0)
    assert np.all(p.status == IN_WATER)
    cdf = exponential_cdf(sign * kz / ws / 10.0)
    assert (stats.kstest(p.sigma, cdf).pvalue > FIVE_SIGMA) == (sign > 0)


def test_mesh_column_inputs_carry_face_depths_to_the_step():
    """The window's column inputs on a mesh: depth and u* (nf, 1, nface), the faces' values."""
    flow, g = mesh_flow(sloping)
    window = flow.window(0.0, 0.0)
    tr = Transport(dt=30.0, vertical=Vertical(manning_n=MANNING))
    assert tr.vertical is not None
    inputs = column.column_inputs(
        mesh_kernel_inputs(flow, window, tr), flow, window, tr.vertical, 30.0
    )
    depth, ustar = inputs.column[0], inputs.column[1]
    assert depth.shape == ustar.shape == (1, 1, g.nface)
    np.testing.assert_allclose(depth[0, 0], corner_mean(g, sloping(g.node_x)), rtol=1e-12)
    np.testing.assert_array_equal(ustar, column.cell_shear_velocity(flow, window, tr.vertical))


# ---------------------------------------------------------------------------------------------
# Layered velocities on a mesh


NL = 10  # equal sigma layers
LEVELS = (np.arange(NL) + 0.5) / NL  # layer centres, fractions of the depth above the bed
USTAR, Z0, KAPPA = 0.05, 0.002, 0.41  # m s-1, m, von Kármán's constant (common practice)


def log_speed(sigma, h):
    """The logarithmic law of the wall u(z) = (u*/κ) ln(z/z0) (e.g. Fischer et al. 1979, Mixing
    in Inland and Coastal Waters, §5.1, from memory)."""
    return USTAR / KAPPA * np.log(sigma * h / Z0)


def layered_file(tmp_path, bed):
    """A steady mesh file in NL equal sigma layers (CF-1.8 Appendix D, ocean_sigma_coordinate):
    u of the log law of a 10 m column at each layer centre on the nodes, v = 0, the surface at
    the datum and the bed ``bed(x)`` m below it on the nodes."""
    x, y, faces = jittered_mesh(24, 16, CELL, jitter=40.0, seed=5)
    sigma = -LEVELS[::-1]  # top layer first, as models write them
    u = np.broadcast_to(log_speed(1.0 + sigma, 10.0)[None, :, None], (1, NL, x.size))
    fields = {
        "u": ("node", u),
        "v": ("node", np.zeros_like(u)),
        "eta": ("node", np.zeros((1, x.size))),
        "bed": ("node", bed(x)[None, :]),
    }
    return write_ugrid(tmp_path / "layered.nc", x, y, faces, fields=fields, sigma=sigma)


def test_layered_mesh_velocity_is_kept_on_its_levels(tmp_path):
    """Opened for a 3-D run, a sigma-layered mesh file keeps u at the layer centres 1 + σ
    (ascending from the bed), beside the thickness-weighted depth mean it always gives; the
    run's summary says so. The twin: opened for a 2-D run it keeps no layers."""
    path = layered_file(tmp_path, lambda x: np.full_like(x, 10.0))
    deep = open_mesh_flow(path, column=True)
    assert deep.layers is not None
    np.testing.assert_allclose(deep.layers.levels, LEVELS, rtol=1e-12)
    np.testing.assert_allclose(deep.layers.u.data[0, :, 0], log_speed(LEVELS, 10.0), rtol=1e-12)
    flat = open_mesh_flow(path)
    assert flat.layers is None
    np.testing.assert_array_equal(deep.u.data, flat.u.data)
    # equal layers: the depth mean is the plain mean of the layer values
    np.testing.assert_allclose(flat.u.data, np.mean(log_speed(LEVELS, 10.0)), rtol=1e-12)
    text = column.describe_vertical(Vertical("constant"), mesh_field(deep))
    assert "velocity in 10 levels" in text
    assert "depth mean" in column.describe_vertical(Vertical("constant"), mesh_field(flat))


@pytest.mark.parametrize("layers", [True, False])
def test_particles_at_the_layer_centres_travel_at_the_speed_of_their_height(tmp_path, layers):
    """Releases held at each layer centre (K_z = 0, no horizontal dispersion) of a layered mesh
    file travel at the log-law speed of their height, to 1e-6 (the float sum of 100 steps). The
    twin, the same file opened without its layers (the depth mean at every height), does not."""
    path = layered_file(tmp_path, lambda x: np.full_like(x, 10.0))
    flow = mesh_field(open_mesh_flow(path, column=layers))
    releases = [
        Release(
            "point",
            np.array([[600.0, 1600.0]]),
            30,
            name=f"layer {k}",
            start_height="above_bed",
            height_above_bed=10.0 * s,
        )
        for k, s in enumerate(LEVELS)
    ]
    tr = Transport(
        dt=20.0,
        dispersion=Dispersion(k1=0.0, k2=0.0),
        vertical=Vertical("constant", coefficient=0.0),
    )
    last = {}
    simulate(
        flow,
        tr,
        releases,
        start=0.0,
        end=2000.0,
        output_interval=2000.0,
        output_grid=GRID,
        seed=3,
        on_output=lambda rs: last.update(p=rs.particles.copy(), owner=rs.owner.copy()),
    )
    p, owner = last["p"], last["owner"]
    speed = (p.x - 600.0) / 2000.0
    expect = log_speed(LEVELS, 10.0)[owner]
    assert np.allclose(speed, expect, rtol=1e-6, atol=0.0) == layers


def profile_mean(drag_coefficient):
    """The depth mean of the layered profile a 3-D run follows, ∫₀¹ u(σ) dσ (scipy.integrate):
    linear between the layer centres, held above the highest, and below the lowest centre σ1 the
    law of the wall u1 ln(z/z0)/ln(z1/z0), 0 below z0, with ln(h/z0) = 1 + κ/√C_d (the
    depth-averaged law of the wall; Soulsby 1997, Dynamics of marine sands, §3.3, from memory),
    which makes it the same in σ for every depth."""
    u = log_speed(LEVELS, 10.0)
    a = 1.0 + KAPPA / math.sqrt(drag_coefficient)

    def speed(s):
        if s <= LEVELS[0]:
            return u[0] * max(math.log(s) + a, 0.0) / (math.log(LEVELS[0]) + a) if s > 0 else 0.0
        return float(np.interp(s, LEVELS, u))

    below, _ = integrate.quad(speed, 0.0, LEVELS[0], points=[math.exp(-a)])
    above, _ = integrate.quad(speed, LEVELS[0], 1.0, points=list(LEVELS[1:]))
    return below + above


@pytest.mark.parametrize("settling", [False, True])
def test_layered_three_dimensional_run_moves_at_the_depth_mean_of_its_profile(tmp_path, settling):
    """A well-mixed neutral release under a parabolic K_z (drag coefficient 0.01) in the
    layered flow over a bed sloping from 3.6 to 6.8 m: its mean displacement after 3600 s is t
    times the depth mean of the profile it follows (:func:`profile_mean`), within 5 standard
    errors of the mean of 2000 displacements. The depth-averaged run of the same file moves at
    the mean of the layer values (equal layers: the reader's thickness-weighted mean), which the
    law of the wall below the lowest centre lowers by about 0.014 m/s: that speed, the speed of
    a profile held at its lowest layer's value to the bed, is rejected by the same check. The
    twin, a settling release over a depositing bed (w_s 5 mm/s, w_d 2 mm/s), lags and fails."""
    path = layered_file(tmp_path, sloping)
    deep_flow = mesh_field(open_mesh_flow(path, column=True))
    flat_flow = mesh_field(open_mesh_flow(path))
    n, t, cd = 2000, 3600.0, 0.01
    _, flat_p, deep_p = flat_and_deep(
        flat_flow, deep_flow, settling, n, t, {"drag_coefficient": cd}
    )
    se = float(np.std(deep_p.x, ddof=1)) / math.sqrt(n)
    gap = abs(float(np.mean(deep_p.x)) - (600.0 + t * profile_mean(cd)))
    assert (gap < 5.0 * se) != settling, (gap, se, profile_mean(cd))
    if not settling:
        held = abs(float(np.mean(deep_p.x)) - (600.0 + t * float(np.mean(log_speed(LEVELS, 10.0)))))
        assert held > 5.0 * se, (held, se)
        assert float(np.mean(flat_p.x)) == pytest.approx(
            600.0 + t * float(np.mean(log_speed(LEVELS, 10.0))), abs=5.0 * se
        )


def test_inspect_of_a_mesh_scenario_describes_its_water_column(tmp_path):
    """`walkers inspect case.toml` of a 3-D run on the layered mesh: K_z, the layered velocity,
    and Visser's substeps per face: u* = n |U| sqrt(g) / h^(1/6) of the depth mean |U| (the mean
    of the layer values) in 10 m, substeps of at most 0.01 h / (2 κ u*). The twin: the same
    scenario without [vertical] is depth-averaged."""
    from walkers.fields.scenario_flow import build_flow
    from walkers.scenario.load import load_scenario

    path = layered_file(tmp_path, lambda x: np.full_like(x, 10.0))
    table = {
        "run": {
            "start": "2026-06-01T00:00:00Z",
            "end": "2026-06-01T01:00:00Z",
            "time_step": "60 s",
            "output_interval": "30 min",
        },
        "flow": {"files": [str(path)]},
        "dispersion": {"method": "constant", "longitudinal": "1 m2/s", "transverse": "1 m2/s"},
        "vertical": {"diffusivity": "parabolic", "manning_n": MANNING},
        "releases": [
            {
                "name": "r",
                "shape": "point",
                "x": "600 m",
                "y": "1600 m",
                "mass": "1 kg",
                "particles": 10,
            }
        ],
        "output": {
            "grid": {
                "west": "100 m",
                "east": "4700 m",
                "south": "100 m",
                "north": "3100 m",
                "cell_size": "200 m",
            }
        },
    }
    text = {}
    for name in ("deep", "flat"):
        sc = load_scenario(table, base_dir=tmp_path)
        text[name] = "\n".join(column.describe_scenario_column(sc, build_flow(sc.flow)))
        table.pop("vertical", None)
    ustar = MANNING * np.mean(log_speed(LEVELS, 10.0)) * math.sqrt(9.81) / 10.0 ** (1 / 6)
    substeps = math.ceil(60.0 / (0.01 * 10.0 / (2 * KAPPA * ustar)))
    assert "Run: three-dimensional: parabolic K_z" in text["deep"]
    assert "velocity in 10 levels (fractions of the depth 0.05, 0.15" in text["deep"]
    assert f"up to {substeps} (Visser" in text["deep"]
    assert text["flat"] == "Run: depth-averaged (no [vertical] section)"


def test_layers_of_a_lon_lat_mesh_are_turned_onto_the_grid_axes(tmp_path):
    """On a lon/lat mesh the kept layers are turned from east/north onto the local projection's
    axes like the depth means: the mean of two equal sigma layers equals the depth mean and each
    layer keeps its speed (to 1e-12). The twin: the file's east/north values unturned differ."""
    x, y, faces = jittered_mesh(24, 16, CELL, jitter=40.0, seed=5)
    u = np.broadcast_to(np.array([1.0, 2.0])[None, :, None], (1, 2, x.size))
    fields = {
        "u": ("node", u),
        "v": ("node", 0.5 * u),
        "eta": ("node", np.zeros((1, x.size))),
        "bed": ("node", np.full((1, x.size), 5.0)),
    }
    path = write_ugrid(
        tmp_path / "geo.nc",
        -4.5 + x * 1e-5,
        52.0 + y * 1e-5,
        faces,
        fields=fields,
        sigma=np.array([-0.25, -0.75]),
        geographic=True,
    )
    flow = open_mesh_flow(path, column=True)
    assert flow.layers is not None
    lu, lv = flow.layers.u.data, flow.layers.v.data
    np.testing.assert_allclose(0.5 * (lu[:, 0] + lu[:, 1]), flow.u.data, rtol=0, atol=1e-12)
    np.testing.assert_allclose(0.5 * (lv[:, 0] + lv[:, 1]), flow.v.data, rtol=0, atol=1e-12)
    speed = np.hypot(lu[0], lv[0])  # bottom layer first (level 0.25): 2 m/s east, 1 m/s north
    np.testing.assert_allclose(speed[0], math.hypot(2.0, 1.0), rtol=1e-12)
    np.testing.assert_allclose(speed[1], math.hypot(1.0, 0.5), rtol=1e-12)
    assert not np.allclose(lu[0, 0], 2.0, rtol=0, atol=1e-12)
