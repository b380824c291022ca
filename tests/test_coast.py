"""Gridded coasts: land walls hold particles and keep a well-mixed tracer well mixed at steps
comparable to the cells, and a deliberately wrong wall rule fails the same checks.

Sources are named beside every check in ``walkers.verify.coast``: the method of images (Carslaw &
Jaeger 1959) and the well-mixed condition (Hunter, Craig & Phillips 1993; Visser 1997), with
5-sigma tolerances from sampling theory.
"""

import numpy as np
import pytest

from walkers.engine import kernels, mover, twin
from walkers.engine.state import HELD_DRY, IN_WATER, ParticleState
from walkers.engine.timestep import check_time_step
from walkers.fields.analytic import grid_flow
from walkers.scenario.config import Dispersion, Transport
from walkers.verify.coast import (
    case_coast_well_mixed,
    case_land_wall_images,
    case_thin_barrier,
)

SEED = 20261202
EDGES = ("west", "east", "south", "north")


def end_cell_only(px, py, pi, pj, qx, qy, xe, ye, wet, iw, edges_mode, max_refl):
    """A wrong wall rule, for the can-fail twins: only the cell where a step ends is looked at
    (a step that jumps over land is accepted), and a candidate on land is mirrored in the face of
    the start cell. Same signature and returns as ``twin.trace_paths``."""
    n = px.size
    edge = np.full(n, -1)
    frac = np.ones(n)
    placed = np.zeros(n, dtype=bool)
    qx, qy = qx.copy(), qy.copy()
    ncx, ncy = xe.size - 1, ye.size - 1
    for _ in range(max_refl):
        todo = ~placed & (edge < 0)
        if not todo.any():
            break
        for e, q, p, bound, low in (
            (0, qx, px, xe[0], True),
            (1, qx, px, xe[-1], False),
            (2, qy, py, ye[0], True),
            (3, qy, py, ye[-1], False),
        ):
            out = todo & (edge < 0) & ((q < bound) if low else (q > bound))
            if edges_mode[e] == 1:
                edge[out] = e
                frac[out] = (p[out] - bound) / (p[out] - q[out])
            else:
                q[out] = 2.0 * bound - q[out]
        todo &= edge < 0
        ci = np.clip(np.searchsorted(xe, qx, side="right") - 1, 0, ncx - 1)
        cj = np.clip(np.searchsorted(ye, qy, side="right") - 1, 0, ncy - 1)
        ok = todo & (wet[iw, cj, ci] != 0)
        placed |= ok
        bad = todo & ~ok
        fx = np.where(ci > pi, xe[np.minimum(pi + 1, ncx)], xe[pi])
        fy = np.where(cj > pj, ye[np.minimum(pj + 1, ncy)], ye[pj])
        qx = np.where(bad & (ci != pi), 2.0 * fx - qx, qx)
        qy = np.where(bad & (cj != pj), 2.0 * fy - qy, qy)
    ci = np.clip(np.searchsorted(xe, qx, side="right") - 1, 0, ncx - 1)
    cj = np.clip(np.searchsorted(ye, qy, side="right") - 1, 0, ncy - 1)
    keep = ~placed & (edge < 0)
    return (
        edge,
        frac,
        placed,
        np.where(keep, px, qx),
        np.where(keep, py, qy),
        np.where(keep, pi, ci),
        np.where(keep, pj, cj),
    )


def failures(result):
    return [(c.name, c.measured, c.expected, c.tolerance) for c in result.checks if not c.passed]


@pytest.mark.parametrize(
    "case,particles",
    [(case_thin_barrier, 20000), (case_land_wall_images, 20000), (case_coast_well_mixed, 100000)],
    ids=["thin-barrier", "land-wall-images", "coast-well-mixed"],
)
def test_coast_case_passes(case, particles):
    result = case(particles, SEED)
    assert not failures(result)


def test_numpy_twin_passes_the_coast_checks():
    """The twin's own path tracer meets the same checks (at one step size, for time)."""
    result = case_coast_well_mixed(
        40000, SEED, stepper="reference", sigmas=(2.0,), geometries=("walls-y", "headland")
    )
    assert not failures(result)


@pytest.mark.parametrize(
    "case,particles,catcher",
    [
        (case_thin_barrier, 500, "beyond the wall"),
        (case_land_wall_images, 1000, "behind the wall"),
        (
            lambda n, s, **kw: case_coast_well_mixed(
                n, s, sigmas=(1.0,), geometries=("walls-x", "staircase"), **kw
            ),
            40000,
            "land",
        ),
    ],
    ids=["thin-barrier", "land-wall-images", "coast-well-mixed"],
)
def test_wrong_wall_rule_fails_the_coast_checks(monkeypatch, case, particles, catcher):
    monkeypatch.setattr(twin, "trace_paths", end_cell_only)
    result = case(particles, SEED, stepper="reference")
    caught = [c for c in result.checks if catcher in c.name and not c.passed]
    assert caught, "the wrong wall rule was not caught"


def channel(banks: str):
    """A channel 20 cells (1 m) wide along x, with uniform flow; its banks are land rows inside
    the grid (behind which the domain edges absorb) or reflecting domain edges."""
    xc = np.arange(-199.5, 200.0, 1.0)
    if banks == "land":
        yc = np.arange(-0.5, 21.0, 1.0)
        wet = np.broadcast_to(((yc > 0) & (yc < 20))[:, None], (yc.size, xc.size))
        edges = dict.fromkeys(EDGES, "absorbing")
    else:
        yc = np.arange(0.5, 20.0, 1.0)
        wet = None
        edges = {
            "west": "absorbing",
            "east": "absorbing",
            "south": "reflecting",
            "north": "reflecting",
        }
    flow = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0.3 + 0 * X, 0 * X), wet=wet)
    return flow, Transport(dt=1.0, dispersion=Dispersion(k1=0.5, k2=0.5), edges=edges)


def test_land_banks_move_particles_as_reflecting_domain_edges_do():
    """The issue's channel: 20 water rows, K = 0.5 m2/s, 1 s steps (σ = 1 cell), 20 000 particles
    on a line across. Land banks and reflecting domain edges give the same paths (to round-off):
    every particle stays in the water, none leaves through the edges behind the banks."""
    n = 20000
    y0 = (np.arange(n) + 0.5) / n * 20.0
    out = {}
    for banks in ("land", "edges"):
        flow, tr = channel(banks)
        st = ParticleState.from_arrays(np.zeros(n), y0.copy(), np.ones(n), np.zeros(n))
        mover.advance(
            st, mover.kernel_inputs(flow, flow.window(0.0, 400.0), tr), 0.0, 1.0, 400, 0, 5
        )
        out[banks] = st
    land, edges = out["land"], out["edges"]
    assert np.all(land.status == IN_WATER) and np.all(edges.status == IN_WATER)
    np.testing.assert_allclose(land.x, edges.x, rtol=0, atol=1e-9)
    np.testing.assert_allclose(land.y, edges.y, rtol=0, atol=1e-9)


def test_paths_through_a_cell_corner_do_not_leak():
    """Land cells touching only at a corner still make a wall: a path aimed exactly through the
    shared corner is reflected (the x face is taken first)."""
    xe = np.arange(0.0, 5.0)
    ye = np.arange(0.0, 5.0)
    wet = np.ones((4, 4), np.int8)
    wet[1, 2] = 0  # land east of cell (1, 1)
    wet[2, 1] = 0  # land north of cell (1, 1): the two touch at the corner (2, 2)
    modes = np.zeros(4, np.int64)
    edge, _, placed, qx, qy, ci, cj = kernels.trace_path(
        1.5, 1.5, 1, 1, 2.5, 2.5, xe, ye, wet[None], 0, modes, 100
    )
    assert edge == -1 and placed
    assert wet[cj, ci] == 1 and (ci, cj) != (2, 2)
    tw = twin.trace_paths(
        np.array([1.5]),
        np.array([1.5]),
        np.array([1]),
        np.array([1]),
        np.array([2.5]),
        np.array([2.5]),
        xe,
        ye,
        wet[None],
        np.array([0]),
        modes,
        100,
    )
    assert (tw[3][0], tw[4][0], tw[5][0], tw[6][0]) == (qx, qy, ci, cj)


def test_particles_held_dry_stay_put_through_reflections():
    """A particle on a cell that has dried is held where it is, bit for bit, while the others
    reflect off the dry cells around it."""
    xc = np.arange(0.5, 20.0, 1.0)
    yc = np.arange(0.5, 20.0, 1.0)
    wet = np.ones((2, yc.size, xc.size))
    wet[1, 8:12, 8:12] = 0.0  # a bank that dries in the second frame
    flow = grid_flow(xc, yc, [0.0, 100.0], lambda X, Y, t: (0 * X, 0 * X))
    object.__setattr__(flow.wet, "data", wet)
    tr = Transport(
        dt=1.0, dispersion=Dispersion(k1=2.0, k2=2.0), edges=dict.fromkeys(EDGES, "reflecting")
    )
    x = np.array([10.2, 9.7, 3.0])
    y = np.array([10.4, 8.1, 3.0])
    st = ParticleState.from_arrays(x.copy(), y.copy(), np.ones(3), np.zeros(3))
    mover.advance(st, mover.kernel_inputs(flow, flow.window(60.0, 100.0), tr), 60.0, 1.0, 40, 0, 3)
    assert np.all(st.status[:2] == HELD_DRY)
    assert st.x[0] == x[0] and st.y[0] == y[0] and st.x[1] == x[1] and st.y[1] == y[1]
    assert st.status[2] == IN_WATER


def test_time_step_check_uses_the_cell_width_along_each_velocity_component():
    """A current of 2 m/s along a channel of 10 m cells (1 m across): a 4 s step moves 8 m, under
    one cell along the flow, and passes; the same step across the channel would not."""
    xc = np.arange(5.0, 1000.0, 10.0)
    yc = np.arange(0.5, 20.0, 1.0)
    along = grid_flow(xc, yc, [0.0], lambda X, Y, t: (2.0 + 0 * X, 0 * X))
    tr = Transport(dt=4.0, dispersion=Dispersion(k1=0.05, k2=0.05))
    report = check_time_step(along, tr, 0.0, 4.0)
    assert report.ok and report.advection_ratio == pytest.approx(0.8)
    across = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0 * X, 2.0 + 0 * X))
    report = check_time_step(across, tr, 0.0, 4.0)
    assert not report.ok and report.advection_ratio == pytest.approx(8.0)
    assert "cell width along that velocity component (1 m)" in report.message()


def test_dispersion_limit_is_per_axis():
    """K along x of 10 m2/s on 10 m cells is within the limit at 4 s (√80 ≈ 8.9 m); K along y of
    the same size on 1 m cells is not."""
    xc = np.arange(5.0, 1000.0, 10.0)
    yc = np.arange(0.5, 20.0, 1.0)
    still = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0 * X, 0 * X))
    ok = check_time_step(still, Transport(dt=4.0, dispersion=Dispersion(k1=10.0, k2=0.01)), 0, 4)
    assert ok.ok
    bad = check_time_step(still, Transport(dt=4.0, dispersion=Dispersion(k1=0.01, k2=10.0)), 0, 4)
    assert not bad.ok and bad.dispersion_cell == pytest.approx(1.0)
