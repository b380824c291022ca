"""The three-dimensional step with the vertical structure of a flow (walkers.engine.vertical,
kernels.compiled_mover's vertical option): horizontal velocity in layers sampled at each
particle's height, vertical velocity w and K_z profiles given per column, and the return of
particles on the bed to the water. Inputs are built as a layered file's window would be
(``walkers.fields.base.WindowColumn``); tolerances come from the sampling error and are stated
beside each check, and every check has a twin that fails.
"""

import math

import numpy as np
import pytest
from scipy import stats

from walkers.engine import mover, vertical
from walkers.engine.state import IN_WATER, ON_BED, ParticleState
from walkers.fields.analytic import grid_flow
from walkers.fields.base import WindowColumn
from walkers.run.reduce import mass_budget
from walkers.scenario.config import Dispersion, Transport

KAPPA = 0.41  # von Kármán's constant (common practice)
H, USTAR, Z0 = 10.0, 0.05, 0.002  # m, m s-1, m: the log profile's depth, u* and roughness
NL = 10  # equal sigma layers
LEVELS = (np.arange(NL) + 0.5) / NL  # layer centres, fractions of the depth above the bed
CELL = 1000.0
FIVE_SIGMA = 2.0 * stats.norm.sf(5.0)


def log_speed(sigma):
    """The logarithmic law of the wall u(z) = (u*/κ) ln(z/z0) (von Kármán 1930 / Prandtl; e.g.
    Fischer et al. 1979, Mixing in Inland and Coastal Waters, §5.1, from memory)."""
    return USTAR / KAPPA * np.log(sigma * H / Z0)


def channel(nx=40, depth=H, u0=0.0):
    """A grid of nx x 3 cells of 1 km with the depth-averaged velocity u0 (m s-1) along x,
    every edge reflecting, no horizontal dispersion: the layered velocity (given separately)
    replaces u0 in three dimensions."""
    xc = CELL * (np.arange(nx) + 0.5)
    yc = CELL * (np.arange(3) + 0.5)
    flow = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0.0 * X + u0, 0.0 * Y), depth=depth)
    tr = Transport(
        dt=20.0,
        dispersion=Dispersion(k1=0.0, k2=0.0),
        edges=dict.fromkeys(("west", "east", "south", "north"), "reflecting"),
    )
    return flow, mover.kernel_inputs(flow, flow.window(0.0, 0.0), tr)


def log_layers(flow, **kw):
    """A steady window column: u of the log law at the layer centres, v = 0."""
    shape = (NL, *flow.depth.data.shape[1:])
    u = np.broadcast_to(log_speed(LEVELS)[:, None, None], shape).copy()
    return WindowColumn(LEVELS, u, np.zeros(shape), **kw)


def start(n, sigma, x=2500.0):
    return ParticleState.from_arrays(
        np.full(n, x), np.full(n, 1500.0), np.full(n, 1.0 / n), np.zeros(n)
    ).in_column(sigma)


# ---------------------------------------------------------------------------------------------
# Horizontal velocity at each particle's height


def test_layered_log_profile_carries_particles_at_the_speed_of_their_height():
    """Particles held at the layer centres (K_z = 0) travel at the log-law speed of their height
    (to 1e-6 relative: the float sum of 100 steps); the twin with the depth-averaged velocity
    (the same flow without layers) does not."""
    flow, inputs = channel()
    layered = mover.with_column(
        inputs, flow.depth.data, USTAR, vertical.KZ_CONSTANT, layers=log_layers(flow)
    )
    t = 2000.0
    for inp, expect_ok in (
        (layered, True),
        (mover.with_column(inputs, flow.depth.data, USTAR, vertical.KZ_CONSTANT), False),
    ):
        state = start(NL, LEVELS)
        mover.advance(state, inp, 0.0, 20.0, 100, 0, 1)
        speed = (state.x - 2500.0) / t
        ok = np.allclose(speed, log_speed(LEVELS), rtol=1e-6, atol=0.0)
        assert ok == expect_ok


def test_depth_mean_of_a_layered_run_equals_the_depth_averaged_run():
    """A well-mixed neutral release under a parabolic K_z: the mean displacement equals that of
    the depth-averaged run, the layers' thickness mean speed times t (5 standard errors of the
    mean of 4000 particles). The twin, a release held in the bottom fifth (K_z = 0), differs."""
    mean_speed = float(np.mean(log_speed(LEVELS)))
    flow, inputs = channel(u0=mean_speed)
    n, t = 4000, 4000.0
    sig = np.random.default_rng(5).uniform(0.0, 1.0, n)
    flat = mover.with_column(inputs, flow.depth.data, USTAR, vertical.KZ_PARABOLIC)
    depth_mean = start(n, sig)
    mover.advance(depth_mean, flat, 0.0, 20.0, 200, 0, 3)
    assert np.allclose(depth_mean.x - 2500.0, mean_speed * t, rtol=1e-9)
    for mode, heights, expect_ok in (
        (vertical.KZ_PARABOLIC, sig, True),
        (vertical.KZ_CONSTANT, 0.2 * sig, False),
    ):
        inp = mover.with_column(inputs, flow.depth.data, USTAR, mode, layers=log_layers(flow))
        state = start(n, heights)
        mover.advance(state, inp, 0.0, 20.0, 200, 0, 3)
        d = state.x - 2500.0
        se = np.std(d, ddof=1) / math.sqrt(n)
        ok = abs(np.mean(d) - float(np.mean(depth_mean.x - 2500.0))) < 5.0 * se
        assert ok == expect_ok


def wall_roughness_length(drag_coefficient):
    """z0 (m) of a depth H whose depth-averaged law of the wall has the drag coefficient C_d:
    U/u* = (1/κ)(ln(H/z0) − 1) with u* = √C_d U, i.e. C_d = [κ / (ln(H/z0) − 1)]² (Soulsby 1997,
    Dynamics of marine sands, §3.3, from memory)."""
    return H * math.exp(-1.0 - KAPPA / math.sqrt(drag_coefficient))


@pytest.mark.parametrize("roughness", ["drag", "manning"])
def test_below_the_lowest_layer_centre_particles_move_at_the_law_of_the_wall_speed(roughness):
    """Particles held (K_z = 0) at heights below the lowest layer centre z1 travel at the law of
    the wall through the lowest layer's value, u1 ln(z/z0) / ln(z1/z0), 0 at or below z0 (to
    1e-9: the float sum of 10 steps), with z0 that of the bed roughness; at and above z1 at the
    layers' speed. The compiled kernel equals its twin (1e-12). The twin check: without a
    roughness the lowest layer's value is held down to the bed, and the same check fails."""
    g = 9.80665  # m s-2, standard gravity (CGPM 1901)
    if roughness == "drag":
        cd, bed_log = 0.0025, vertical.bed_log_law(None, 0.0025)
    else:
        # Manning's u* = n U √g / h^(1/6) (common practice) is C_d = g n² / h^(1/3)
        cd, bed_log = g * 0.03**2 / H ** (1.0 / 3.0), vertical.bed_log_law(0.03, None)
    z0, z1 = wall_roughness_length(cd), LEVELS[0] * H
    assert 0.0 < z0 < 0.1 * z1  # the log layer is resolved: z0 ~ 1-3 mm, z1 = 0.5 m
    z = np.array([0.0, 0.5 * z0, z0, 1.5 * z0, 0.01, 0.05, 0.2, 0.45, z1, LEVELS[3] * H])
    u1 = float(log_speed(LEVELS[0]))
    with np.errstate(divide="ignore"):
        law = np.where(z > z0, u1 * np.log(z / z0) / np.log(z1 / z0), 0.0)
        expect = np.where(z < z1, law, log_speed(z / H))
    flow, inputs = channel()
    for bed, expect_ok in ((bed_log, True), ((0.0, 0.0), False)):
        inp = mover.with_column(
            inputs,
            flow.depth.data,
            USTAR,
            vertical.KZ_CONSTANT,
            layers=log_layers(flow),
            bed_log=bed,
        )
        moved = []
        for stepper in ("fast", "reference"):
            state = start(z.size, z / H)
            mover.advance(state, inp, 0.0, 20.0, 10, 0, 1, stepper=stepper)
            moved.append(state.x)
        np.testing.assert_allclose(moved[0], moved[1], rtol=0, atol=1e-12 * 2500.0)
        speed = (moved[0] - 2500.0) / 200.0
        ok = np.allclose(speed, expect, rtol=1e-9, atol=1e-12)
        assert ok == expect_ok, (speed, expect)


# ---------------------------------------------------------------------------------------------
# Three-dimensional steps beside thin land

THIN_WALLS = {
    # land cells (i, j) on a grid of 50 m cells, the flow's direction, the open edge, and where
    # particles start: a straight wall across a channel 400 m wide, and a diagonal staircase of
    # cells touching only at their corners
    "straight": (
        (40, 8),
        lambda i, j: i == 20,
        (1.0, 0.0),
        "south",
        lambda rng, n: (rng.uniform(700.0, 950.0, n), rng.uniform(0.0, 400.0, n)),
    ),
    "diagonal": (
        (40, 40),
        lambda i, j: i == j,
        (math.sqrt(0.5), -math.sqrt(0.5)),
        "west",
        lambda rng, n: (lambda x: (x, x + rng.uniform(150.0, 400.0, n)))(
            rng.uniform(20.0, 1500.0, n)
        ),
    ),
}


def thin_wall_walk(stepper, wall, steps=24):
    """A layered flow of 0.3 m/s mean towards a land wall one cell (50 m) thick
    (:data:`THIN_WALLS`), K = 5 m2 s-1 and dt = 300 s (noise σ = √(2 K dt) = 55 m, advection
    90 m: one to two cells a step), settling particles over a depositing bed, one edge open:
    after every step, (particles beyond the wall, particles in a land cell, |released − (in water
    + on the bed + out)|) at their worst, and the budget's parts."""
    (nx, ny), is_land, (ex, ey), open_edge, starts = THIN_WALLS[wall]
    xc = 50.0 * (np.arange(nx) + 0.5)
    yc = 50.0 * (np.arange(ny) + 0.5)
    jj, ii = np.indices((ny, nx))
    land = is_land(ii, jj)
    flow = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0 * X, 0 * X), depth=H, wet=~land)
    edges = dict.fromkeys(("west", "east", "south", "north"), "reflecting")
    tr = Transport(
        dt=300.0, dispersion=Dispersion(k1=5.0, k2=5.0), edges={**edges, open_edge: "absorbing"}
    )
    inputs = mover.kernel_inputs(flow, flow.window(0.0, 0.0), tr)
    speed = (0.3 / np.mean(log_speed(LEVELS)) * log_speed(LEVELS))[:, None, None]
    shape = (NL, ny, nx)
    u, v = (np.broadcast_to(e * speed, shape).copy() for e in (ex, ey))
    col = WindowColumn(LEVELS, u, v)
    inp = mover.with_column(
        inputs, flow.depth.data, USTAR, vertical.KZ_CONSTANT, 0.01, 1e-4, layers=col
    )
    n = 200
    rng = np.random.default_rng(12)
    x0, y0 = starts(rng, n)
    state = ParticleState.from_arrays(x0, y0, np.full(n, 0.5), np.zeros(n)).in_column(
        rng.uniform(0.0, 1.0, n), np.full(n, 1e-3)
    )
    side = is_land(*(np.floor(v / 50.0) for v in (x0, y0)))  # no particle starts on land
    assert not np.any(side)
    worst = np.zeros(3)
    for s in range(steps):
        mover.advance(state, inp, s * 300.0, 300.0, 1, s, 5, stepper=stepper)
        here = (state.status == IN_WATER) | (state.status == ON_BED)
        i = np.clip(np.floor(state.x / 50.0), 0, nx - 1)
        j = np.clip(np.floor(state.y / 50.0), 0, ny - 1)
        beyond = i > 20 if wall == "straight" else i > j
        b = mass_budget(state)
        gap = b["budget_released"] - (
            b["budget_in_water"] + b["budget_on_bed"] + float(np.sum(b["budget_outflow"]))
        )
        worst = np.maximum(worst, [np.sum(here & beyond), np.sum(here & is_land(i, j)), abs(gap)])
    return worst, mass_budget(state)


@pytest.mark.parametrize("wall", THIN_WALLS)
def test_three_dimensional_steps_of_a_cell_or_more_never_cross_thin_land(wall):
    """Nothing crosses the wall (straight, or a staircase of cells meeting at their corners),
    nothing ends on land, and released = in water + on the bed + out to round-off (10 ulp of
    the 100 kg released) after every step; particles did reach the bed and the open edge, so the
    budget check is not empty. The twin: the wrong wall rule of tests/test_coast.py (only the
    cell where a step ends is looked at) lets particles jump the wall, and the same check
    fails."""
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).parent))
    from test_coast import end_cell_only

    from walkers.engine import twin

    worst, budget = thin_wall_walk("fast", wall)
    assert worst[0] == 0 and worst[1] == 0, worst
    assert worst[2] <= 10 * np.finfo(float).eps * 100.0, worst
    assert budget["budget_on_bed"] > 0.0 and np.sum(budget["budget_outflow"]) > 0.0, budget
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(twin, "trace_paths", end_cell_only)
        wrong, _ = thin_wall_walk("reference", wall)
    assert wrong[0] > 0, wrong


# ---------------------------------------------------------------------------------------------
# Vertical velocity and K_z from the file


def test_constant_vertical_velocity_moves_particles_by_w_t():
    """With K_z = 0 a constant w lifts particles by w t (to 1e-9 m); the twin that leaves w out
    does not."""
    flow, inputs = channel(nx=3)
    shape = (2, 3, 3)
    w = 1e-3
    col = log_layers(flow)
    col.w_levels, col.w = np.array([0.0, 1.0]), np.full(shape, w)
    with_w = mover.with_column(inputs, flow.depth.data, USTAR, vertical.KZ_CONSTANT, layers=col)
    without = mover.with_column(inputs, flow.depth.data, USTAR, vertical.KZ_CONSTANT)
    for inp, expect_ok in ((with_w, True), (without, False)):
        state = start(5, 0.2, x=1500.0)
        mover.advance(state, inp, 0.0, 20.0, 100, 0, 1)
        assert np.allclose(state.sigma * H, 0.2 * H + w * 2000.0, rtol=0, atol=1e-9) == expect_ok


def parabolic_kz_column(flow, nk=21):
    """A window column whose K_z is the parabolic profile κ u* z (1 - z/h) sampled at nk levels
    from the bed to the surface (as a model writes K_z on the layer faces)."""
    klev = np.linspace(0.0, 1.0, nk)
    k = KAPPA * USTAR * H * klev * (1.0 - klev)
    col = log_layers(flow)
    col.kz_levels = klev
    col.kz = np.ascontiguousarray(np.broadcast_to(k[:, None, None], (nk, 3, 3)))
    return col


@pytest.mark.parametrize("drift", [1.0, 0.0])
def test_kz_profile_from_the_file_keeps_a_well_mixed_tracer_well_mixed(drift):
    """A uniform tracer under the K_z profile read from the column stays uniform with the drift
    dK_z/dz (Visser 1997, Mar. Ecol. Prog. Ser. 158: the well-mixed condition); χ² over 20 bins
    of 20 000 particles after 5000 s at the 5σ level. Without the drift (the twin) the particles
    gather where K_z is low and the test fails. The substeps follow the profile's curvature:
    nine of 2.2 s for steps of 20 s, as for the analytic parabola (Visser's criterion)."""
    flow, inputs = channel(nx=3)
    col = parabolic_kz_column(flow)
    curv = vertical.profile_curvatures(flow.depth.data, col.kz_levels, col.kz)
    assert np.allclose(curv, 2.0 * KAPPA * USTAR / H, rtol=1e-9)
    inp = mover.with_column(inputs, flow.depth.data, USTAR, vertical.KZ_FILE, dt=20.0, layers=col)
    inp.column[2][vertical.P_DRIFT] = drift
    n = 20000
    state = start(n, np.random.default_rng(11).uniform(0.0, 1.0, n), x=1500.0)
    mover.advance(state, inp, 0.0, 20.0, 250, 0, 3)
    p = stats.chisquare(np.histogram(state.sigma, bins=20, range=(0.0, 1.0))[0]).pvalue
    assert (p > FIVE_SIGMA) == (drift == 1.0)


# ---------------------------------------------------------------------------------------------
# Particles on the bed return to the water above a critical shear stress


@pytest.mark.parametrize("law", ["partheniades", "without_minus_one"])
def test_resuspension_empties_the_bed_at_the_first_order_rate(law):
    """Particles on the bed under a constant τ = ρ u*² = 2 τ_c leave it at the rate
    λ = M_e (τ/τ_c − 1) (Partheniades 1965, from memory; the per-particle form is ours, see
    ``vertical.resuspension_chance``): the mass on the bed after t is exp(−λ t) of the start
    (binomial, 5 standard errors, 20 000 particles). The twin compares with the law written
    without the "− 1" (rate M_e τ/τ_c) and fails. The budget stays exact."""
    flow, inputs = channel(nx=3)
    rho = 1025.0
    tau_c = 0.5 * rho * USTAR**2
    rate_m = 2e-4
    inp = mover.with_column(
        inputs,
        flow.depth.data,
        USTAR,
        vertical.KZ_PARABOLIC,
        critical_shear_stress=tau_c,
        erosion_rate=rate_m,
        water_density=rho,
    )
    n, t = 20000, 3000.0
    state = start(n, 0.0, x=1500.0)
    state.status[:] = ON_BED
    mover.advance(state, inp, 0.0, 20.0, 150, 0, 9)
    left = np.mean(state.status == ON_BED)
    ratio = rho * USTAR**2 / tau_c
    rate = rate_m * (ratio - 1.0) if law == "partheniades" else rate_m * ratio
    expect = math.exp(-rate * t)
    se = math.sqrt(expect * (1.0 - expect) / n)
    assert (abs(left - expect) < 5.0 * se) == (law == "partheniades")
    assert set(np.unique(state.status)) == {IN_WATER, ON_BED}
    b = mass_budget(state)
    assert b["budget_in_water"] + b["budget_on_bed"] == pytest.approx(1.0, rel=1e-12)


def test_no_resuspension_below_the_critical_stress():
    """τ = ρ u*² at or below τ_c: no particle leaves the bed (Partheniades 1965, from memory);
    the twin with τ_c just below τ empties some of it."""
    flow, inputs = channel(nx=3)
    tau = 1025.0 * USTAR**2
    for tau_c, expect_all in ((tau, True), (0.9 * tau, False)):
        inp = mover.with_column(
            inputs,
            flow.depth.data,
            USTAR,
            vertical.KZ_PARABOLIC,
            critical_shear_stress=tau_c,
            erosion_rate=1e-2,
        )
        state = start(200, 0.0, x=1500.0)
        state.status[:] = ON_BED
        mover.advance(state, inp, 0.0, 20.0, 50, 0, 9)
        assert bool(np.all(state.status == ON_BED)) == expect_all


# ---------------------------------------------------------------------------------------------
# The compiled step equals its numpy twin


@pytest.mark.parametrize("scheme", ["euler", "rk4"])
def test_compiled_column_step_equals_numpy_twin(scheme):
    """Layered, time-varying u and v, w and K_z profiles from the column, a depositing bed and
    resuspension, particles released inside steps, on the tidal basin of test_vertical: the
    compiled kernel and its numpy twin agree to 1e-12 (status bitwise)."""
    from test_vertical import tidal_basin

    from walkers.engine.coefficients import shear_velocity

    flow = tidal_basin()
    tr = Transport(
        dt=30.0,
        scheme=scheme,
        dispersion=Dispersion(k1=2.0, k2=0.5),
        edges={
            "west": "reflecting",
            "east": "absorbing",
            "south": "reflecting",
            "north": "reflecting",
        },
    )
    window = flow.window(0.0, 3600.0)
    nf, ny, nx = window.u.shape
    rng = np.random.default_rng(8)
    shape = (nf * NL, ny, nx)
    prof = (0.6 + 0.8 * np.tile(LEVELS, nf))[:, None, None]
    u = np.repeat(window.u, NL, axis=0) * prof
    v = np.repeat(window.v, NL, axis=0) * prof + 0.01 * rng.standard_normal(shape)
    klev = np.linspace(0.0, 1.0, 6)
    # K_z scales with h² so that its curvature stays within the substeps on the drying bank
    scale = (window.depth[:, None] / 8.0) ** 2 * (1.0 + 0.5 * rng.uniform(size=(nf, 1, ny, nx)))
    kz = 0.01 * (0.1 + klev * (1.0 - klev))[None, :, None, None] * scale
    wlev = np.array([0.25, 0.75])
    w = 2e-4 * rng.standard_normal((nf * 2, ny, nx))
    col = WindowColumn(LEVELS, u, v, wlev, w, klev, kz.reshape(nf * 6, ny, nx))
    inputs = mover.kernel_inputs(flow, window, tr)
    ustar = shear_velocity(window.depth, np.hypot(window.u, window.v), drag_coefficient=0.0025)
    inputs = mover.with_column(
        inputs,
        window.depth,
        ustar,
        vertical.KZ_FILE,
        0.0,
        2e-3,
        dt=30.0,
        layers=col,
        critical_shear_stress=0.05,
        erosion_rate=5e-3,
        bed_log=vertical.bed_log_law(None, 0.0025),  # the law of the wall below LEVELS[0]
    )
    n = 1200
    a = ParticleState.from_arrays(
        rng.uniform(50.0, 1950.0, n),
        rng.uniform(20.0, 680.0, n),
        np.full(n, 0.2),
        rng.uniform(0.0, 900.0, n),
    ).in_column(rng.uniform(0.0, 1.0, n), rng.choice([0.003, 0.0, -0.002], n))
    b = a.copy()
    mover.advance(a, inputs, 0.0, 30.0, 100, 7, 21, stepper="fast")
    mover.advance(b, inputs, 0.0, 30.0, 100, 7, 21, stepper="reference")
    np.testing.assert_array_equal(a.status, b.status)
    assert {IN_WATER, ON_BED} <= set(np.unique(a.status))
    np.testing.assert_allclose(a.sigma, b.sigma, rtol=0, atol=1e-12)
    np.testing.assert_allclose(a.x, b.x, rtol=0, atol=1e-12 * 2000)
    np.testing.assert_allclose(a.y, b.y, rtol=0, atol=1e-12 * 2000)


# ---------------------------------------------------------------------------------------------
# Shear dispersion emerges from the layered velocity and vertical mixing


def taylor_coefficient(levels, speeds):
    """The longitudinal dispersion coefficient (m2 s-1) of a steady shear flow u(z) mixed by
    K_z(z): K = (1/h) ∫_0^h q(z)² / K_z(z) dz, q(z) = ∫_0^z (u − ū) dζ (Taylor 1954, "The
    dispersion of matter in turbulent flow through a pipe", Proc. R. Soc. A 223; Elder 1959,
    "The dispersion of marked fluid in turbulent shear flow", J. Fluid Mech. 5, for the open
    channel; from memory), for the profile the step samples (linear between the layer centres,
    held beyond them) and the parabolic K_z: the inner integral by scipy's cumulative
    trapezoid rule on 200 001 points (exact for the piecewise linear u between them), the outer
    by Simpson's rule (scipy.integrate.simpson)."""
    from scipy import integrate

    z = np.linspace(0.0, H, 200001)
    u = np.interp(z / H, levels, speeds)
    q = integrate.cumulative_trapezoid(u - integrate.trapezoid(u, z) / H, z, initial=0.0)
    kz = KAPPA * USTAR * z * (1.0 - z / H)
    inner = np.divide(q**2, kz, out=np.zeros_like(z), where=kz > 0.0)
    return integrate.simpson(inner, x=z) / H


def test_log_profile_with_vertical_mixing_gives_taylor_elder_shear_dispersion():
    """A well-mixed release in the layered log profile with the parabolic K_z and no horizontal
    dispersion: the longitudinal variance grows at 2K with K of Taylor's integral for that
    profile (Taylor 1954; Elder 1959 gives K = 5.93 h u* for the continuous log law, from
    memory; 4.80 h u* here, the profile held below the lowest layer centre), between 1.5 and
    4.5 mixing times h²/K̄_z; within 5 standard errors of the growth, estimated from 20 batches
    of 200 particles (measured: 2.36 ± 0.07 m2 s-1 against 2.40). The twin, the depth-averaged
    run of the same release, shows no growth and fails."""
    expect = taylor_coefficient(LEVELS, log_speed(LEVELS))
    assert 0.6 * 5.93 * H * USTAR < expect < 1.4 * 5.93 * H * USTAR  # near Elder's value
    mean_speed = float(np.mean(log_speed(LEVELS)))
    flow, inputs = channel(nx=60, u0=mean_speed)
    n, dt = 4000, 20.0
    t_mix = H**2 / (KAPPA * USTAR * H / 6.0)
    s1, s2 = int(round(1.5 * t_mix / dt)), int(round(4.5 * t_mix / dt))
    sig = np.random.default_rng(21).uniform(0.0, 1.0, n)
    for layered, expect_ok in ((True, True), (False, False)):
        inp = mover.with_column(
            inputs,
            flow.depth.data,
            USTAR,
            vertical.KZ_PARABOLIC,
            layers=log_layers(flow) if layered else None,
        )
        state = start(n, sig)
        mover.advance(state, inp, 0.0, dt, s1, 0, 13)
        x1 = state.x.copy()
        mover.advance(state, inp, s1 * dt, dt, s2 - s1, s1, 13)
        batches = np.arange(n) % 20
        growth = np.array(
            [np.var(state.x[batches == b]) - np.var(x1[batches == b]) for b in range(20)]
        ) / (2.0 * (s2 - s1) * dt)
        got, se = growth.mean(), growth.std(ddof=1) / math.sqrt(20)
        assert (abs(got - expect) < 5.0 * se) == expect_ok
