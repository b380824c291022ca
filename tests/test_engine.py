"""The compiled step against its numpy twin, thread independence, walls, drying and releases."""

import numba
import numpy as np
import pytest

from walkers.engine import drift, kernels, mover, twin
from walkers.engine.state import EXITED, IN_WATER, WAITING, ParticleState
from walkers.errors import InputError
from walkers.fields.analytic import analytic_flow, grid_flow
from walkers.fields.base import centre_to_edges
from walkers.run.simulate import simulate
from walkers.scenario.config import Dispersion, OutputGrid, Release, Transport


def harbour_flow():
    """A time-varying, non-uniform flow with land, a drying bank and varying depth (invented)."""
    xc = np.linspace(0.0, 4000.0, 81)
    yc = np.linspace(0.0, 2000.0, 41)
    times = np.arange(0.0, 7200.0 + 1, 900.0)
    X, Y = np.meshgrid(xc, yc)
    land = (Y > 1500.0) & (X > 1000.0) & (X < 2500.0)
    land |= (X > 3000.0) & (Y < 400.0)

    def velocity(X, Y, t):
        phase = np.cos(2 * np.pi * t / 7200.0)
        return 0.4 * phase + 0.1 * np.sin(Y / 400.0), 0.05 * np.cos(X / 700.0) * phase

    base = 6.0 + 4.0 * np.sin(X / 900.0) * np.cos(Y / 600.0)
    depth = np.stack(
        [base - 5.0 * (1 + np.cos(2 * np.pi * t / 7200.0)) / 2 * (Y < 300) for t in times]
    )
    flow = grid_flow(xc, yc, times, velocity, depth=depth, wet=~land)
    wet = (~land)[None] & (depth > 0.5)
    flow.wet.data[...] = 0.0
    object.__setattr__(flow.wet, "data", wet.astype(np.float64))
    return flow


def state_for(n, rng, t_spread=1800.0):
    x = rng.uniform(200.0, 900.0, n)
    y = rng.uniform(500.0, 1400.0, n)
    return ParticleState.from_arrays(x, y, np.full(n, 0.1), rng.uniform(0.0, t_spread, n))


@pytest.mark.parametrize("mode,scheme", [("axes", "euler"), ("aligned", "rk4")])
def test_compiled_kernel_equals_numpy_twin(mode, scheme):
    """Same random numbers, same arithmetic: positions agree to 1e-12 (DESIGN.md §4.7)."""
    flow = harbour_flow()
    kfield = 1.0 + 0.5 * np.cos(flow.x / 500.0)[None, :] * np.ones((flow.y.size, 1))
    tr = Transport(
        dt=30.0,
        scheme=scheme,
        decay_rate=2e-4,
        dispersion=Dispersion(k1_field=3 * kfield, k2_field=kfield, mode=mode),
        edges={
            "west": "reflecting",
            "east": "absorbing",
            "south": "reflecting",
            "north": "absorbing",
        },
    )
    rng = np.random.default_rng(7)
    a = state_for(3000, rng)
    a.x[::10] = 3980.0  # some start beside the absorbing east edge
    b = a.copy()
    inputs = mover.kernel_inputs(flow, flow.window(0.0, 3600.0), tr)
    mover.advance(a, inputs, 0.0, 30.0, 120, 11, 99, stepper="fast")
    mover.advance(b, inputs, 0.0, 30.0, 120, 11, 99, stepper="reference")
    np.testing.assert_array_equal(a.status, b.status)
    np.testing.assert_allclose(a.x, b.x, rtol=0, atol=1e-12 * 4000)
    np.testing.assert_allclose(a.y, b.y, rtol=0, atol=1e-12 * 4000)
    np.testing.assert_allclose(a.mass, b.mass, rtol=1e-12)
    np.testing.assert_allclose(a.exit_time, b.exit_time, rtol=1e-12)
    assert {IN_WATER, EXITED + 1} <= set(np.unique(a.status))


def test_fast_path_equals_numpy_twin():
    """The kernel's fast path (2-D, Euler, constant K along the axes, no drift, u and v on shared
    uniform axes) against the twin, with land, edges, decay and releases inside steps."""
    xc = np.linspace(0.0, 4000.0, 81)
    yc = np.linspace(0.0, 2000.0, 41)
    X, Y = np.meshgrid(xc, yc)
    land = (Y > 1500.0) & (X > 1000.0) & (X < 2500.0)
    flow = grid_flow(
        xc,
        yc,
        [0.0, 3600.0],
        lambda X, Y, t: (0.3 + 0.1 * np.sin(Y / 300.0), 0.05 * np.cos(X / 500.0)),
        depth=5.0,
        wet=~land,
    )
    tr = Transport(
        dt=30.0,
        decay_rate=1e-4,
        dispersion=Dispersion(k1=2.0, k2=0.5),
        edges={
            "west": "reflecting",
            "east": "absorbing",
            "south": "absorbing",
            "north": "reflecting",
        },
    )
    a = state_for(3000, np.random.default_rng(5))
    a.x[::7] = 3985.0
    b = a.copy()
    inputs = mover.kernel_inputs(flow, flow.window(0.0, 3600.0), tr)
    mover.advance(a, inputs, 0.0, 30.0, 120, 3, 42, stepper="fast")
    mover.advance(b, inputs, 0.0, 30.0, 120, 3, 42, stepper="reference")
    np.testing.assert_array_equal(a.status, b.status)
    np.testing.assert_allclose(a.x, b.x, rtol=0, atol=1e-12 * 4000)
    np.testing.assert_allclose(a.y, b.y, rtol=0, atol=1e-12 * 4000)
    np.testing.assert_allclose(a.mass, b.mass, rtol=1e-12)
    assert EXITED + 1 in set(np.unique(a.status))


def test_twin_check_can_fail():
    """A different key gives different numbers: the equality above is not vacuous."""
    flow = analytic_flow("uniform", u=0.1)
    tr = Transport(dt=60.0, dispersion=Dispersion(k1=1.0, k2=1.0))
    a = ParticleState.from_arrays(np.zeros(10), np.zeros(10), np.ones(10), np.zeros(10))
    b = a.copy()
    inputs = mover.kernel_inputs(flow, flow.window(0, 600), tr)
    mover.advance(a, inputs, 0.0, 60.0, 10, 0, 1, stepper="fast")
    mover.advance(b, inputs, 0.0, 60.0, 10, 0, 2, stepper="reference")
    assert np.abs(a.x - b.x).max() > 1.0


def test_one_thread_equals_two_threads_bitwise():
    flow = harbour_flow()
    tr = Transport(dt=30.0, dispersion=Dispersion(k1=2.0, k2=0.5, mode="aligned"))
    rng = np.random.default_rng(3)
    a = state_for(20000, rng)
    b = a.copy()
    inputs = mover.kernel_inputs(flow, flow.window(0.0, 3600.0), tr)
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        mover.advance(a, inputs, 0.0, 30.0, 120, 0, 5)
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        mover.advance(b, inputs, 0.0, 30.0, 120, 0, 5)
    finally:
        numba.set_num_threads(before)
    for name, arr in a.arrays().items():
        assert np.array_equal(arr, b.arrays()[name], equal_nan=True), name


def test_every_kernel_option_is_a_plain_value_the_kernel_closes_over():
    """numba's disk cache keys a compiled closure by the values of the variables it closes over
    (numba.core.caching, the index key; read from numba's source), not by its decorator's
    options: two option sets must differ there, or the kernel compiled first is loaded for both;
    and those values must be plain numbers (an object such as a dispatcher pickles differently
    in every process, and the kernel would never load from the cache)."""
    base = (2, 0, True, True, False, True, False, True, True, 0, 0)
    other = (1, 1, False, False, True, False, True, False, False, 1, 1)

    def closed_over(options):
        return [c.cell_contents for c in kernels.compiled_mover(*options).py_func.__closure__]

    assert all(type(v) in (bool, int) for v in closed_over(base))
    for k, value in enumerate(other):
        changed = (*base[:k], value, *base[k + 1 :])
        assert closed_over(changed) != closed_over(base), k


def test_no_particle_on_land_outside_or_nan():
    flow = harbour_flow()
    tr = Transport(
        dt=60.0,
        dispersion=Dispersion(k1=20.0, k2=20.0),
        edges=dict.fromkeys(("west", "east", "south", "north"), "reflecting"),
    )
    rng = np.random.default_rng(11)
    st = state_for(20000, rng, t_spread=0.0)
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    for k in range(8):
        t0 = 900.0 * k
        win = flow.window(t0, t0 + 900.0)
        mover.advance(st, mover.kernel_inputs(flow, win, tr), t0, 60.0, 15, 15 * k, 8)
        assert np.all(np.isfinite(st.x)) and np.all(np.isfinite(st.y))
        assert st.x.min() >= xe[0] and st.x.max() <= xe[-1]
        assert st.y.min() >= ye[0] and st.y.max() <= ye[-1]
        i = np.searchsorted(xe, st.x, side="right") - 1
        j = np.searchsorted(ye, st.y, side="right") - 1
        land = flow.wet.data[0][j, i] == 0  # permanent land: wet in no frame
        never_wet = ~np.any(flow.wet.data[:, j, i] > 0, axis=0)
        assert not np.any(land & never_wet)


def test_drying_cell_holds_particles_and_budget_counts_them():
    xc = np.arange(5.0, 1000.0, 10.0)
    yc = np.arange(5.0, 200.0, 10.0)
    times = np.array([0.0, 3600.0, 7200.0])
    depth = np.stack([np.full((yc.size, xc.size), d) for d in (2.0, 0.01, 2.0)])
    flow = grid_flow(xc, yc, times, lambda X, Y, t: (0 * X, 0 * X), depth=depth)
    wet = (depth > 0.05).astype(np.float64)
    object.__setattr__(flow.wet, "data", wet)
    tr = Transport(
        dt=60.0,
        dispersion=Dispersion(k1=0.1, k2=0.1),
        edges=dict.fromkeys(("west", "east", "south", "north"), "reflecting"),
    )
    rel = [Release("point", np.array([[500.0, 100.0]]), 500, mass=5.0)]
    grid = OutputGrid(x0=5.0, dx=10.0, nx=100, y0=5.0, dy=10.0, ny=20)
    ds = simulate(
        flow, tr, rel, start=0.0, end=7200.0, output_interval=1800.0, output_grid=grid, seed=1
    )
    at_low = ds.sel(time=3600.0)
    assert float(at_low.budget_held_dry) == pytest.approx(5.0)
    assert float(at_low.budget_in_water) == 0.0
    assert float(ds.budget_in_water[-1]) == pytest.approx(5.0)
    assert float(ds.budget_held_dry[-1]) == 0.0


def test_particle_released_inside_a_step_moves_only_after_release():
    flow = analytic_flow("uniform", u=1.0)
    tr = Transport(dt=60.0, dispersion=Dispersion(k1=0.0, k2=0.0))
    st = ParticleState.from_arrays(
        np.zeros(3), np.zeros(3), np.ones(3), np.array([0.0, 30.0, 59.0])
    )
    mover.advance(st, mover.kernel_inputs(flow, flow.window(0, 60), tr), 0.0, 60.0, 1, 0, 0)
    np.testing.assert_allclose(st.x, [60.0, 30.0, 1.0], atol=1e-12)
    waiting = ParticleState.from_arrays(np.zeros(1), np.zeros(1), np.ones(1), np.array([60.0]))
    mover.advance(waiting, mover.kernel_inputs(flow, flow.window(0, 60), tr), 0.0, 60.0, 1, 0, 0)
    assert waiting.status[0] == WAITING and waiting.x[0] == 0.0


def test_time_step_check_fails_or_substeps():
    flow = analytic_flow("uniform", u=2.0, nx=101, ny=11, x_range=(0, 1000), y_range=(0, 100))
    tr = Transport(dt=60.0, dispersion=Dispersion(k1=0.1, k2=0.1))
    rel = [Release("point", np.array([[100.0, 50.0]]), 10, mass=1.0)]
    grid = OutputGrid(x0=5.0, dx=10.0, nx=100, y0=5.0, dy=10.0, ny=10)
    args = dict(start=0.0, end=600.0, output_interval=600.0, output_grid=grid)
    along = r"\|u\|·dt = 120 m exceeds the cell width along that velocity component \(10 m\)"
    with pytest.raises(InputError, match=along):
        simulate(flow, tr, rel, **args)
    ds = simulate(flow, tr, rel, time_step_check="substep", **args)
    assert float(ds.budget_outflow.sel(edge="east")[-1]) == pytest.approx(1.0)


def test_random_deviates_are_standard_normal():
    """Ziggurat deviates on the SplitMix64 counter stream: KS against N(0, 1) (scipy.stats);
    5-sigma critical value."""
    from scipy import stats

    z = kernels.normals_for(np.uint64(123), np.arange(200000, dtype=np.int64), 7).ravel()
    crit = stats.kstwo.ppf(1 - 5.7e-7, z.size)
    assert stats.kstest(z, "norm").statistic < crit
    assert abs(np.corrcoef(z[0::2], z[1::2])[0, 1]) < 5 / np.sqrt(z.size / 2)
    streams = twin.particle_streams(123, np.arange(5))
    np.testing.assert_allclose(
        np.stack(twin.normal_pairs(streams, 7), axis=1),
        kernels.normals_for(np.uint64(123), np.arange(5, dtype=np.int64), 7),
        rtol=1e-14,
    )


def test_drift_on_a_geographic_grid_uses_the_meridian_arc():
    """K rising linearly with the distance north along the meridian: the drift (1/h) ∂(hK)/∂y is
    its slope in m s-1 at every latitude. Distance along the meridian is ∫ M(φ) dφ (Snyder 1987,
    Map Projections — A Working Manual, eq. 4-18 for M; scipy.integrate.quad), not φ·M(φ)."""
    import dataclasses as dc

    from scipy import integrate

    from walkers.engine.drift import dispersion_frames
    from walkers.fields.analytic import grid_flow
    from walkers.fields.geo import metres_per_degree
    from walkers.scenario.config import Dispersion, Transport

    lon = np.linspace(-3.0, -2.0, 11)
    lat = np.linspace(40.0, 60.0, 201)
    arc = np.array(
        [integrate.quad(lambda p: metres_per_degree(np.array([p]))[1][0], 40.0, v)[0] for v in lat]
    )
    slope = 1e-6  # m2 s-1 per m
    k2 = np.broadcast_to((1.0 + slope * arc)[:, None], (lat.size, lon.size)).copy()
    flow = dc.replace(
        grid_flow(lon, lat, [0.0], lambda X, Y, t: (0 * X, 0 * X), depth=5.0), geographic=True
    )
    tr = Transport(dt=60.0, dispersion=Dispersion(k1_field=np.ones_like(k2), k2_field=k2))
    frames = dispersion_frames(flow, flow.window(0.0, 0.0), tr)
    inner = frames.drift_y[0, 2:-2, 5]
    # centred differences of a smooth field on a 0.1° grid: second order, far below 1e-4; the
    # coordinate φ·M(φ) in its place is off by up to 0.9 % over these latitudes
    assert np.max(np.abs(inner / slope - 1.0)) < 1e-4, np.max(np.abs(inner / slope - 1.0))


def test_drift_of_a_frame_shared_by_windows_is_the_drift_computed_afresh():
    """The drift of each frame is kept per frame time (``drift._dispersion_frames``): the drift
    of a window whose first frame the previous window computed equals the drift of the same
    window on a fresh copy of the flow, bit for bit (the scenario workload: estimated K aligned
    with the flow over drying flats, so K and the drift change from frame to frame)."""
    from walkers import workloads

    flow, transport = workloads.scenario_workload(nx=40, ny=20, frames=4)
    drift.dispersion_frames(flow, flow.window(0.0, 3600.0), transport)
    shared = drift.dispersion_frames(flow, flow.window(3600.0, 7200.0), transport)
    fresh_flow, fresh_transport = workloads.scenario_workload(nx=40, ny=20, frames=4)
    fresh = drift.dispersion_frames(fresh_flow, fresh_flow.window(3600.0, 7200.0), fresh_transport)
    assert shared.drift_x.shape[0] == 2 and np.any(shared.drift_x[0] != shared.drift_x[1])
    np.testing.assert_array_equal(shared.drift_x, fresh.drift_x)
    np.testing.assert_array_equal(shared.drift_y, fresh.drift_y)


def _land_cases():
    """Fields and wet masks for the land filling: a coast with islands and inland cells beyond
    the reach of the sweeps, a wet cell holding NaN, a dike one cell thick between two waters, a
    channel one cell wide through land, one row, one cell of water, all land."""
    rng = np.random.default_rng(7)
    ny, nx = 30, 45
    yy, xx = np.mgrid[0:ny, 0:nx]
    coast = (xx + 3.0 * np.sin(yy / 4.0) < 25.0) & ~((yy - 8) ** 2 + (xx - 10) ** 2 < 9)
    field = rng.normal(3.0, 1.0, (ny, nx))
    holed = field.copy()
    holed[5, 5] = np.nan
    one_cell = np.zeros((ny, nx), bool)
    one_cell[12, 40] = True
    row = rng.random((1, 60)) < 0.3
    dike = xx != 20
    channel = yy == 15
    return [
        (field, coast),
        (holed, coast),
        (field, dike),
        (field, channel),
        (field, one_cell),
        (rng.normal(size=(1, 60)), row),
        (field, np.zeros((ny, nx), bool)),
        (field, rng.random((ny, nx)) < 0.5),
    ]


def test_land_filling_kernel_equals_its_numpy_twin():
    """``kernels.fill_land`` (through ``drift._fill_land``) against ``twin.fill_land``: the
    values carried onto land, and the mean given to cells beyond the sweeps, bit for bit."""
    for a, wet in _land_cases():
        compiled = drift._fill_land(a, wet)
        reference = twin.fill_land(a, wet, drift.FILL_SWEEPS)
        assert np.all(np.isfinite(compiled))
        np.testing.assert_array_equal(compiled, reference)
        np.testing.assert_array_equal(compiled[wet & np.isfinite(a)], a[wet & np.isfinite(a)])
    # a dike one cell thick takes the mean of the water on its two sides
    a, dike = _land_cases()[2]
    np.testing.assert_array_equal(drift._fill_land(a, dike)[:, 20], (a[:, 19] + a[:, 21]) / 2)


def test_land_filling_check_can_fail():
    """The twin of the check above: with one sweep fewer the twin gives other values (cells two
    and three cells from the water then take the field's mean), and the check sees it."""
    a, wet = _land_cases()[0]
    compiled = drift._fill_land(a, wet)
    fewer = twin.fill_land(a, wet, drift.FILL_SWEEPS - 1)
    assert not np.array_equal(compiled, fewer)
