"""The vertical step (walkers.engine.vertical) against published results.

Columns of water without horizontal motion: a grid of 3 x 3 cells at rest, every edge reflecting,
no horizontal dispersion, so only the vertical step moves the particles. Tolerances come from
the sampling error of the particle count (stated beside each check); every check has a twin that
fails (no drift, a wrong settling sign, a deposition law off by √π).
"""

import math

import numpy as np
import pytest
from scipy import integrate, stats

from walkers.engine import mover, vertical
from walkers.engine.state import IN_WATER, ON_BED, ParticleState
from walkers.errors import InputError
from walkers.fields.analytic import grid_flow
from walkers.run.reduce import mass_budget
from walkers.scenario.config import Dispersion, Transport

#: two-sided tail probability of 5 standard deviations of a normal: the level of every test here
FIVE_SIGMA = 2.0 * stats.norm.sf(5.0)


def still_column(depth, decay_rate=0.0):
    """Inputs of a grid of 3 x 3 cells of 100 m at rest, depth in metres, every edge reflecting."""
    xc = np.array([0.0, 100.0, 200.0])
    flow = grid_flow(xc, xc, [0.0, 1e9], lambda X, Y, t: (0.0 * X, 0.0 * Y), depth=depth)
    tr = Transport(
        dt=10.0,
        decay_rate=decay_rate,
        dispersion=Dispersion(k1=0.0, k2=0.0),
        edges=dict.fromkeys(("west", "east", "south", "north"), "reflecting"),
    )
    return flow, mover.kernel_inputs(flow, flow.window(0.0, 1e9), tr)


def run_column(
    n,
    sigma,
    settling,
    depth,
    ustar,
    mode,
    kz,
    wd,
    dt,
    nsteps,
    drift=1.0,
    seed=3,
    decay_rate=0.0,
    fraction=vertical.VISSER_FRACTION,
):
    """Particles at heights sigma (fractions of the depth) in the middle cell, stepped, with
    substeps of at most ``fraction`` / max|K_z''|."""
    flow, inputs = still_column(depth, decay_rate)
    inputs = mover.with_column(
        inputs, flow.depth.data, ustar, mode, kz, wd, substep_fraction=fraction
    )
    inputs.column[2][3] = drift
    state = ParticleState.from_arrays(
        np.full(n, 100.0), np.full(n, 100.0), np.full(n, 1.0 / n), np.zeros(n)
    ).in_column(sigma, settling)
    mover.advance(state, inputs, 0.0, dt, nsteps, 0, seed)
    return state


def uniform_heights(n, seed=11):
    return np.random.default_rng(seed).uniform(0.0, 1.0, n)


# ---------------------------------------------------------------------------------------------
# Well mixed with a parabolic K_z (Visser 1997, Mar. Ecol. Prog. Ser. 158, 275-281)

H, USTAR = 10.0, 0.05  # m, m s-1: K_z peaks at κ u* h / 4 = 0.051 m2 s-1


def chi_square_uniform(sigma, bins=20):
    counts = np.histogram(sigma, bins=bins, range=(0.0, 1.0))[0]
    return stats.chisquare(counts).pvalue


@pytest.mark.parametrize("drift", [1.0, 0.0])
def test_well_mixed_stays_well_mixed_only_with_the_drift(drift):
    """A uniform tracer stays uniform with the drift dK/dz (Visser 1997: the well-mixed
    condition); without it the particles gather where K_z is low, at the bed and the surface.
    χ² over 20 bins of 20 000 particles after 5000 s (1.7 mixing times h² / mean K_z), at the 5σ
    level; steps of 20 s in 9 vertical substeps of 2.2 s, a hundredth of 1/max|K''| = h / (2κu*).
    """
    dt = 20.0
    params = vertical.column_params(vertical.KZ_PARABOLIC)
    longest = vertical.column_longest(H, USTAR, params)
    assert longest == pytest.approx(0.01 * H / (2 * vertical.KAPPA * USTAR), rel=1e-12)
    assert (
        vertical.check_substeps(dt, np.full((1, 1, 1), H), np.full((1, 1, 1), USTAR), params) == 9
    )
    n = 20_000
    st = run_column(n, uniform_heights(n), 0.0, H, USTAR, 2, 0.0, 0.0, dt, 250, drift=drift)
    p = chi_square_uniform(st.sigma)
    if drift:
        assert p > FIVE_SIGMA, p
    else:
        assert p < FIVE_SIGMA, p  # the twin that fails: the naive walk
        ends = np.mean((st.sigma < 0.05) | (st.sigma > 0.95))
        assert ends > 0.1 + 5 * math.sqrt(0.1 * 0.9 / n)


def test_the_loss_at_the_surface_and_the_bed_shrinks_with_the_substep():
    """Where K_z = 0 but dK_z/dz ≠ 0 (the bed and the surface of the parabolic profile), the
    reflected walk carries particles out of a thin layer faster than the small noise there brings
    them back: a discretisation error, which shrinks as the substep does (the Euler scheme
    reflected at a boundary converges weakly: Gobet 2001, ESAIM: Probab. Stat. 5, 261-297, from
    memory; docs/method.md measures it). 200 000 particles, uniform at first, after 5000 s: the
    end fortieths of the column hold less than uniform at the substep fraction 0.08 by more than
    5 binomial standard errors, and less at 0.08 than at 0.01 (the default) by more than 5
    standard errors of the difference (measured over five seeds: 18 % and 5-9 % of the
    fortieths' mass lost, 6.5-8.5 standard errors apart). The twin: a fraction that did not reach
    the walk would give the same loss twice."""
    n = 200_000
    loss, se = {}, {}
    for fraction in (0.08, 0.01):
        st = run_column(
            n, uniform_heights(n), 0.0, H, USTAR, 2, 0.0, 0.0, 20.0, 250, fraction=fraction
        )
        ends = np.mean((st.sigma < 0.025) | (st.sigma > 0.975))
        loss[fraction] = 0.05 - ends
        se[fraction] = math.sqrt(0.05 * 0.95 / n)
    assert loss[0.08] > 5 * se[0.08], loss
    assert loss[0.08] - loss[0.01] > 5 * math.hypot(se[0.08], se[0.01]), loss


# ---------------------------------------------------------------------------------------------
# Settling with constant K_z over a reflecting bed: C(z) ∝ exp(-w_s z / K_z) (the balance
# w_s C + K dC/dz = 0 of settling and diffusion, zero net flux; Rouse 1937 with K constant,
# from memory)


def exponential_cdf(scale_fraction):
    """CDF on [0, 1] of the density ∝ exp(-s / a), a the decay height as a fraction of depth."""
    a = scale_fraction

    def cdf(s):
        return np.expm1(-np.asarray(s) / a) / math.expm1(-1.0 / a)

    return cdf


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_settling_and_rising_with_constant_kz_reach_the_exponential_profile(sign):
    """Settling (w_s > 0) piles towards the bed, rising (w_s < 0) towards the surface, with the
    decay height K/|w_s| = 5 m in a 10 m column; KS test of 10 000 heights after 5000 s (five
    times the slowest relaxation 1 / (K π² / h² + w_s² / 4K)) at the 5σ level. The twin: the
    profile of the opposite sign is refused."""
    kz, ws = 0.01, 0.002 * sign
    n = 10_000
    st = run_column(n, uniform_heights(n), ws, H, 0.0, 1, kz, 0.0, 5.0, 1000)
    assert np.all(st.status == IN_WATER)
    right = exponential_cdf(kz / ws / H)
    wrong = exponential_cdf(-kz / ws / H)
    assert stats.kstest(st.sigma, right).pvalue > FIVE_SIGMA
    assert stats.kstest(st.sigma, wrong).pvalue < FIVE_SIGMA


# ---------------------------------------------------------------------------------------------
# Settling with a parabolic K_z: the Rouse profile C(z) ∝ ((h - z) / z)^P, P = w_s / (κ u*)
# (Rouse 1937, Trans. ASCE 102; van Rijn 1993, Principles of Sediment Transport in Rivers,
# Estuaries and Coastal Seas, §7, from memory)


def rouse_cdf(p):
    """CDF on [0, 1] of the Rouse density ((1 - s) / s)^p (p < 1: the singularity at the bed is
    integrable), by scipy.integrate.quad on a grid fine near the bed, interpolated linearly."""
    ends = np.geomspace(1e-10, 0.5, 400)
    grid = np.unique(np.concatenate([[0.0, 1.0], ends, 1.0 - ends]))
    pieces = [
        integrate.quad(lambda u: ((1.0 - u) / u) ** p, a, b)[0]
        for a, b in zip(grid[:-1], grid[1:], strict=True)
    ]
    table = np.concatenate([[0.0], np.cumsum(pieces)])
    table /= table[-1]
    return lambda s: np.interp(s, grid, table)


def test_rouse_cdf_against_the_incomplete_beta_function():
    """∫₀^s u^-p (1 - u)^p du / B(1 - p, 1 + p) is the regularised incomplete beta function
    I_s(1 - p, 1 + p) (Abramowitz & Stegun 1964, 6.6.2; scipy.special.betainc)."""
    from scipy import special

    s = np.linspace(0.0, 1.0, 1001)
    err = np.max(np.abs(rouse_cdf(0.3)(s) - special.betainc(0.7, 1.3, s)))
    assert err < 1e-4, err  # the interpolation between grid points (the KS tolerance is 0.03)


@pytest.mark.parametrize("drift", [1.0, 0.0])
def test_settling_with_parabolic_kz_reaches_the_rouse_profile(drift):
    """P = 0.3 (w_s = 0.3 κ u*); 8 000 heights, uniform at first, after 10⁴ s (3.4 mixing times
    h² / mean K_z) against the Rouse CDF above the reference level a = 0.05 h (van Rijn's form of
    the profile holds above a; below it the walk's substeps cannot follow the z^-P singularity:
    measured, 3.2 % of the mass below 0.01 h instead of 4.9 %, converging as the substep shrinks:
    4.0 % at 0.5 s, 4.8 % at 0.1 s). KS at the 5σ level. The twin that fails: no drift."""
    p = 0.3
    ws = p * vertical.KAPPA * USTAR
    n = 8_000
    st = run_column(n, uniform_heights(n), ws, H, USTAR, 2, 0.0, 0.0, 20.0, 500, drift=drift)
    cdf = rouse_cdf(p)
    a = 0.05
    above = st.sigma[st.sigma >= a]
    pvalue = stats.kstest(above, lambda s: (cdf(s) - cdf(a)) / (1.0 - cdf(a))).pvalue
    if drift:
        assert pvalue > FIVE_SIGMA, pvalue
    else:
        assert pvalue < FIVE_SIGMA, pvalue


# ---------------------------------------------------------------------------------------------
# Deposition on the bed of a well-mixed column: the mass in the water decays as exp(-w_d t / h)
# when mixing is fast (w_d h / K ≪ 1; the first-order law of a column with a bed flux w_d C_b,
# common practice), exactly as the series of a slab with a radiating face (Carslaw & Jaeger 1959,
# Conduction of Heat in Solids, §3.11, from memory).


def slab_fraction_left(k, h, wd, t, terms=60):
    """Σ 2 Bi² / (β² (β² + Bi² + Bi)) exp(-β² K t / h²), β tan β = Bi = w_d h / K (one face
    insulated, uniform start)."""
    from scipy.optimize import brentq

    bi = wd * h / k
    total = 0.0
    for m in range(terms):
        lo, hi = m * math.pi + 1e-12, m * math.pi + math.pi / 2 - 1e-12
        beta = brentq(lambda b: b * math.tan(b) - bi, lo, hi)
        total += (
            2
            * bi
            * bi
            / (beta * beta * (beta * beta + bi * bi + bi))
            * math.exp(-beta * beta * k * t / (h * h))
        )
    return total


@pytest.mark.parametrize("factor", [1.0, 1.0 / math.sqrt(math.pi)])
def test_deposit_from_a_well_mixed_column_follows_the_first_order_law(factor):
    """h = 2 m, K = 0.01 m2 s-1, w_d = 10⁻⁴ m s-1 (w_d h / K = 0.02): after h ln 2 / w_d half the
    mass is on the bed. 20 000 particles: tolerance 5 binomial standard errors plus the gap
    between the first-order law and the exact slab series (computed, 0.2 %). The twin that fails:
    the deposition probability without its √π (w_d sqrt(Δt / K))."""
    h, kz, wd, dt = 2.0, 0.01, 1e-4, 10.0
    t_end = 1390 * dt
    n = 20_000
    st = run_column(n, uniform_heights(n), 0.0, h, 0.0, 1, kz, wd * factor, dt, 1390)
    on_bed = np.mean(st.status == ON_BED)
    assert set(np.unique(st.status)) == {IN_WATER, ON_BED}
    assert np.all(st.sigma[st.status == ON_BED] == 0.0)
    law = 1.0 - math.exp(-wd * t_end / h)
    exact = 1.0 - slab_fraction_left(kz, h, wd, t_end)
    se = math.sqrt(law * (1.0 - law) / n)
    tol = 5.0 * se + abs(exact - law)
    if factor == 1.0:
        assert abs(on_bed - law) < tol, (on_bed, law, exact, se)
    else:
        assert abs(on_bed - law) > tol, (on_bed, law)


def test_slab_series_starts_full_and_tends_to_the_first_order_law():
    """The series is 1 at t = 0 (its weights sum to one) and near exp(-w_d t / h) for small Bi."""
    assert slab_fraction_left(0.01, 2.0, 1e-4, 0.0, terms=2000) == pytest.approx(1.0, abs=1e-3)
    assert slab_fraction_left(0.01, 2.0, 1e-4, 1e4) == pytest.approx(math.exp(-0.5), rel=5e-3)


def test_budget_with_the_bed_is_exact():
    """released = in water + on the bed + decayed to round-off, with decay and deposition."""
    n = 4_000
    st = run_column(
        n, uniform_heights(n), 0.001, 2.0, 0.0, 1, 0.01, 5e-4, 10.0, 300, decay_rate=1e-5
    )
    b = mass_budget(st)
    assert b["budget_on_bed"] > 0.1 * b["budget_released"]
    parts = b["budget_in_water"] + b["budget_on_bed"] + b["budget_decayed"]
    parts += b["budget_held_dry"] + float(np.sum(b["budget_outflow"]))
    assert parts == pytest.approx(b["budget_released"], rel=1e-12)
    assert "budget_on_bed" not in mass_budget(ParticleState.from_arrays(*np.ones((4, 3))))


# ---------------------------------------------------------------------------------------------
# The compiled step equals its numpy twin (DESIGN.md §4.7)


def tidal_basin():
    """An invented basin with land, a drying bank, depth varying in space and time."""
    xc = np.linspace(0.0, 2000.0, 41)
    yc = np.linspace(0.0, 1000.0, 21)
    times = np.arange(0.0, 3600.0 + 1, 900.0)
    X, Y = np.meshgrid(xc, yc)
    land = (Y > 700.0) & (X > 800.0) & (X < 1200.0)

    def velocity(X, Y, t):
        phase = np.cos(2 * np.pi * t / 3600.0)
        return 0.3 * phase + 0.1 * np.sin(Y / 300.0), 0.05 * np.cos(X / 400.0) * phase

    base = 5.0 + 3.0 * np.sin(X / 500.0) * np.cos(Y / 400.0)
    depth = np.stack([base - 1.5 * (1 + np.cos(2 * np.pi * t / 3600.0)) * (Y < 200) for t in times])
    return grid_flow(xc, yc, times, velocity, depth=depth, wet=~land)


@pytest.mark.parametrize("mode", [vertical.KZ_CONSTANT, vertical.KZ_PARABOLIC])
def test_compiled_vertical_step_equals_numpy_twin(mode):
    """Settling, rising and neutral particles over a depositing bed, u* from the flow's speed and
    a drag coefficient (walkers.engine.coefficients), releases inside steps, land, an open edge:
    the compiled kernel and its numpy twin agree to 1e-12 (status bitwise)."""
    from walkers.engine.coefficients import shear_velocity

    flow = tidal_basin()
    tr = Transport(
        dt=30.0,
        scheme="rk4",
        decay_rate=1e-4,
        dispersion=Dispersion(k1=2.0, k2=0.5),
        edges={
            "west": "reflecting",
            "east": "absorbing",
            "south": "reflecting",
            "north": "reflecting",
        },
    )
    window = flow.window(0.0, 3600.0)
    inputs = mover.kernel_inputs(flow, window, tr)
    ustar = shear_velocity(window.depth, np.hypot(window.u, window.v), drag_coefficient=0.0025)
    inputs = mover.with_column(inputs, window.depth, ustar, mode, 0.005, 2e-3, dt=30.0)
    rng = np.random.default_rng(4)
    n = 1500
    a = ParticleState.from_arrays(
        rng.uniform(50.0, 1950.0, n),
        rng.uniform(20.0, 680.0, n),
        np.full(n, 0.2),
        rng.uniform(0.0, 900.0, n),
    ).in_column(rng.uniform(0.0, 1.0, n), rng.choice([0.003, 0.0, -0.002], n))
    a.x[::9] = 1990.0
    b = a.copy()
    mover.advance(a, inputs, 0.0, 30.0, 100, 7, 21, stepper="fast")
    mover.advance(b, inputs, 0.0, 30.0, 100, 7, 21, stepper="reference")
    np.testing.assert_array_equal(a.status, b.status)
    assert {IN_WATER, ON_BED} <= set(np.unique(a.status))
    np.testing.assert_allclose(a.sigma, b.sigma, rtol=0, atol=1e-12)
    np.testing.assert_allclose(a.x, b.x, rtol=0, atol=1e-12 * 2000)
    np.testing.assert_allclose(a.y, b.y, rtol=0, atol=1e-12 * 2000)
    np.testing.assert_allclose(a.mass, b.mass, rtol=1e-12)
    assert np.all((a.sigma >= 0.0) & (a.sigma <= 1.0))


def test_vertical_twin_check_can_fail():
    """The equality check sees a changed vertical stream (another key): sigma differs."""
    flow, inputs = still_column(10.0)
    inputs = mover.with_column(inputs, flow.depth.data, USTAR, vertical.KZ_PARABOLIC)
    n = 300
    a = ParticleState.from_arrays(
        np.full(n, 100.0), np.full(n, 100.0), np.ones(n), np.zeros(n)
    ).in_column(uniform_heights(n))
    b = a.copy()
    mover.advance(a, inputs, 0.0, 20.0, 10, 0, 1, stepper="fast")
    mover.advance(b, inputs, 0.0, 20.0, 10, 0, 2, stepper="reference")
    assert np.max(np.abs(a.sigma - b.sigma)) > 1e-3


def test_horizontal_motion_is_unchanged_by_the_vertical_step():
    """The vertical step draws from its own stream: x and y are those of the depth-averaged run
    bitwise (the depth-averaged velocity moves particles at every height)."""
    flow = tidal_basin()
    tr = Transport(dt=30.0, dispersion=Dispersion(k1=2.0, k2=0.5))
    window = flow.window(0.0, 3600.0)
    flat = mover.kernel_inputs(flow, window, tr)
    deep = mover.with_column(flat, window.depth, 0.03, vertical.KZ_PARABOLIC)
    rng = np.random.default_rng(8)
    n = 1000
    a = ParticleState.from_arrays(
        rng.uniform(50.0, 1950.0, n), rng.uniform(20.0, 680.0, n), np.ones(n), np.zeros(n)
    )
    b = a.copy().in_column(0.5)
    mover.advance(a, flat, 0.0, 30.0, 60, 0, 5)
    mover.advance(b, deep, 0.0, 30.0, 60, 0, 5)
    np.testing.assert_array_equal(a.x, b.x)
    np.testing.assert_array_equal(a.y, b.y)
    assert np.std(b.sigma) > 0.05


# ---------------------------------------------------------------------------------------------
# Bad input


def test_bad_vertical_settings_are_refused_with_the_key_named():
    flow, inputs = still_column(10.0)
    h = flow.depth.data
    with pytest.raises(InputError, match="vertical diffusivity mode 4"):
        mover.with_column(inputs, h, USTAR, 4)
    with pytest.raises(InputError, match="the file has no vertical diffusivity"):
        mover.with_column(inputs, h, USTAR, vertical.KZ_FILE)
    with pytest.raises(InputError, match="critical shear stress = -1.0: must be a number >= 0"):
        mover.with_column(inputs, h, USTAR, 1, 0.01, critical_shear_stress=-1.0)
    with pytest.raises(InputError, match="deposition velocity = -0.1: must be a number >= 0"):
        mover.with_column(inputs, h, USTAR, 1, 0.01, -0.1)
    with pytest.raises(InputError, match="dt = 30000 s would need 12300 vertical substeps"):
        mover.with_column(inputs, h, USTAR, vertical.KZ_PARABOLIC, dt=3e4)
    state = ParticleState.from_arrays(*np.ones((4, 3)))
    column_inputs = mover.with_column(inputs, h, USTAR, vertical.KZ_CONSTANT, 0.01)
    with pytest.raises(InputError, match="no sigma; place the particles"):
        mover.advance(state, column_inputs, 0.0, 10.0, 1, 0, 1)
    with pytest.raises(InputError, match="fractions of the depth from 0"):
        state.in_column(1.5)
    with pytest.raises(InputError, match="settling velocities: give finite numbers"):
        state.in_column(0.5, np.nan)


@pytest.mark.parametrize("layered", [False, True])
def test_compiled_vertical_step_equals_numpy_twin_on_a_mesh(layered):
    """On an unstructured mesh (a particle's column is its face; depth and u* per face, the
    mean of the face's node depths) the compiled step and its twin agree, status bitwise; also
    with layered node velocities (a shear growing with height, in time as well) sampled at each
    particle's height, which then differ from the depth-mean run (the layers are used)."""
    from mesh_files import jittered_mesh

    from walkers.engine.mesh_inputs import locate_particles, mesh_kernel_inputs
    from walkers.fields.base import WindowColumn
    from walkers.fields.mesh import MeshFlow, MeshVariable, build_geometry
    from walkers.fields.mesh_field import mesh_field
    from walkers.fields.mesh_open import coast_only

    x, y, faces = jittered_mesh(24, 16, 64, jitter=12, seed=5)
    g = build_geometry(x, y, faces, where="test")
    node_depth = 2.0 + 0.004 * g.node_x
    mesh = MeshFlow(
        g,
        np.array([0.0, 1800.0]),
        "seconds since 2026-01-01T00:00:00Z",
        "standard",
        MeshVariable("node", np.full((2, g.nnode), 0.2)),
        MeshVariable("node", np.full((2, g.nnode), 0.05)),
        MeshVariable("node", node_depth[None]),
        np.ones((1, g.nface), np.uint8),
        coast_only(g),
        source="test mesh",
    )
    flow = mesh_field(mesh)
    tr = Transport(dt=30.0, dispersion=Dispersion(k1=1.0, k2=1.0))
    corners = g.face_nodes >= 0
    face_depth = np.where(corners, node_depth[np.maximum(g.face_nodes, 0)], 0.0).sum(1)
    face_depth = (face_depth / corners.sum(1))[None, None, :]
    inputs = mesh_kernel_inputs(flow, flow.window(0.0, 1800.0), tr)
    plain = mover.with_column(inputs, face_depth, 0.02, vertical.KZ_PARABOLIC, 0.0, 1e-3)
    if layered:
        shear = np.array([1.0, -0.5])[:, None] * np.array([0.0, 0.1, 0.25, 0.4])[None, :]
        u = np.broadcast_to(0.2 + shear[:, :, None, None], (2, 4, 1, g.nnode)).reshape(8, 1, -1)
        u = np.ascontiguousarray(u)
        layers = WindowColumn(
            np.array([0.1, 0.3, 0.6, 0.9]), u, np.ascontiguousarray(0.3 * u[::-1])
        )
        inputs = mover.with_column(
            inputs, face_depth, 0.02, vertical.KZ_PARABOLIC, 0.0, 1e-3, layers=layers
        )
    else:
        inputs = plain
    rng = np.random.default_rng(6)
    n = 800
    a = ParticleState.from_arrays(
        rng.uniform(10, 1500, n), rng.uniform(10, 1000, n), np.ones(n), rng.uniform(0, 600, n)
    ).in_column(rng.uniform(0.0, 1.0, n), rng.choice([0.002, 0.0, -0.001], n))
    locate_particles(flow, a)
    b, c = a.copy(), a.copy()
    mover.advance(a, inputs, 0.0, 30.0, 60, 0, 9, stepper="fast")
    mover.advance(b, inputs, 0.0, 30.0, 60, 0, 9, stepper="reference")
    np.testing.assert_array_equal(a.status, b.status)
    assert {IN_WATER, ON_BED} <= set(np.unique(a.status))
    np.testing.assert_allclose(a.sigma, b.sigma, rtol=0, atol=1e-12)
    np.testing.assert_allclose(a.x, b.x, rtol=0, atol=1e-12 * 1500)
    np.testing.assert_allclose(a.y, b.y, rtol=0, atol=1e-12 * 1500)
    if layered:
        mover.advance(c, plain, 0.0, 30.0, 60, 0, 9, stepper="fast")
        assert np.max(np.abs(a.x - c.x)) > 1.0
