"""The duality of forward and backward transport: the forward concentration at a detection D from
a unit release at S equals the backward influence of S on D, within sampling error.

For dX = [u + (1/h)∇·(hK)] dt + √(2K) dW with volume conserved (∂h/∂t + ∇·(hu) = 0), particles
moved backward from D with the advection reversed and the drift kept give, at S, a density
h(S) G(D | S) / h(D), G the forward transition density; so their box-counted concentration is the
forward concentration at D per unit mass released at S (Marchuk 1995, Adjoint Equations and
Analysis of Complex Systems, ch. 1; Keats, Yee & Lien 2007, Atmos. Environ. 41 — from memory).
Both sides are averaged over the same circles (the forward release spread over a circle at S and
counted in a circle at D; the backward one the other way round), so they estimate the same number
exactly and differ only by sampling error: each estimate C from n particles has a standard error
C/√n (a multinomial count, common practice); the check allows 5 combined standard errors.

Each flow has a twin that must fail: advection not reversed (the backward particles carried
downstream), and on the sheared flow with a strong depth gradient the drift (1/h)∇·(hK) left out.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from walkers.attribution.influence import PlaceCounts, backward_run
from walkers.fields.analytic import grid_flow
from walkers.run.simulate import simulate
from walkers.scenario.config import Dispersion, OutputGrid, Receptor, Release, Transport
from walkers.scenario.sources import Candidate, Detection

HOUR = 3600.0
RADIUS = 200.0  # m, the circles at S and at D
EDGES = {"west": "absorbing", "east": "absorbing", "south": "reflecting", "north": "reflecting"}
X = np.linspace(-6000.0, 6000.0, 121)
Y = np.linspace(-2000.0, 2000.0, 41)
GRID = OutputGrid(x0=-5950.0, dx=100.0, nx=120, y0=-1950.0, dy=100.0, ny=40)
TRANSPORT = Transport(dt=60.0, dispersion=Dispersion(k1=20.0, k2=20.0), edges=EDGES)


def forward_at(flow, source, place, t_release, t_detect, particles, seed, transport=TRANSPORT):
    """Forward concentration (kg m-3) at ``place`` at ``t_detect`` from 1 kg released over a
    circle at ``source`` at ``t_release``, and the particles behind it."""
    release = Release("circle", np.array([source]), particles, start=t_release, radius=RADIUS)
    receptor = Receptor("D", *place, radius=RADIUS)
    counter = PlaceCounts([receptor], GRID, flow, 2)
    ds = simulate(
        flow,
        transport,
        [release],
        start=t_release,
        end=t_detect,
        output_interval=t_detect - t_release,
        output_grid=GRID,
        receptors=[receptor],
        seed=seed,
        on_output=counter,
    )
    return float(ds["receptor_concentration"].values[0, -1]), float(counter.counts[0, -1])


def backward_at(flow, source, place, t_release, t_detect, particles, seed, transport=TRANSPORT):
    """Backward influence (m-3) of ``source`` at ``t_release`` on a grab sample at ``place`` at
    ``t_detect``, and the particles behind it."""
    detection = Detection("D", *place, t_detect, t_detect, value=1.0, radius=RADIUS)
    candidate = Candidate("S", *source, t_release, t_release, radius=RADIUS)
    ds = backward_run(
        flow,
        transport,
        detection,
        [candidate],
        start=t_release,
        end=t_detect,
        output_interval=t_detect - t_release,
        output_grid=GRID,
        particles=particles,
        seed=seed,
    )
    return float(ds["place_influence"].values[0, 0]), float(ds["place_count"].values[0, 0])


def standard_errors(forward, backward):
    """(backward − forward) in combined standard errors C/√n."""
    (cf, nf), (cb, nb) = forward, backward
    se = np.hypot(cf / np.sqrt(max(nf, 1.0)), cb / np.sqrt(max(nb, 1.0)))
    return (cb - cf) / se


# (a) Steady shear u(y) = U0 + γy along x with depth h(y): ∇·(hu) = ∂(h(y)u(y))/∂x = 0.
U0, GAMMA = 0.2, 1e-4


def shear_depth(yy):
    return 1.0 + 0.004 * (yy + 2000.0)  # 1 m at the south wall to 17 m at the north one


def shear_flow(sign=1.0):
    return grid_flow(
        X,
        Y,
        [0.0],
        lambda xx, yy, t: (sign * (U0 + GAMMA * yy), 0.0 * xx),
        depth=shear_depth(np.meshgrid(X, Y)[1]),
    )


SHEAR_S, SHEAR_D, SHEAR_T = (-3000.0, -1650.0), (-1400.0, -930.0), 6 * HOUR
PARTICLES = 50_000


@pytest.fixture(scope="module")
def shear_forward():
    return forward_at(shear_flow(), SHEAR_S, SHEAR_D, 0.0, SHEAR_T, PARTICLES, seed=11)


def test_duality_on_a_sheared_flow_with_depth_varying_across_it(shear_forward):
    backward = backward_at(shear_flow(), SHEAR_S, SHEAR_D, 0.0, SHEAR_T, PARTICLES, seed=12)
    assert shear_forward[1] > 500 and backward[1] > 500  # both estimates rest on many particles
    assert abs(standard_errors(shear_forward, backward)) < 5.0


def test_duality_fails_when_advection_is_not_reversed(shear_forward):
    # the flow given already negated, so the backward run carries particles downstream
    backward = backward_at(shear_flow(-1.0), SHEAR_S, SHEAR_D, 0.0, SHEAR_T, PARTICLES, seed=12)
    assert abs(standard_errors(shear_forward, backward)) > 5.0


def test_duality_fails_without_the_drift_term(shear_forward):
    no_drift = dataclasses.replace(TRANSPORT, drift_correction=False)
    backward = backward_at(
        shear_flow(), SHEAR_S, SHEAR_D, 0.0, SHEAR_T, PARTICLES, seed=12, transport=no_drift
    )
    assert abs(standard_errors(shear_forward, backward)) > 5.0


# (b) A tide over a bed sloping across the channel: h = H(y) + a sin ωt, and the flux along x
# hu = Qm + Q0 cos ωt − x a ω cos ωt, so ∂h/∂t + ∂(hu)/∂x = aω cos ωt − aω cos ωt = 0 exactly.
AMPLITUDE, OMEGA, Q_TIDE, Q_MEAN = 0.75, 2.0 * np.pi / 44712.0, 1.5, 0.5
TIDAL_T = 6 * HOUR
TIMES = np.arange(0.0, TIDAL_T + 601.0, 600.0)


def tidal_depth(xx, yy, t):
    return 3.0 + 0.003 * (yy + 2000.0) + AMPLITUDE * np.sin(OMEGA * t) + 0.0 * xx


def tidal_flow(sign=1.0):
    def velocity(xx, yy, t):
        flux = Q_MEAN + Q_TIDE * np.cos(OMEGA * t) - xx * AMPLITUDE * OMEGA * np.cos(OMEGA * t)
        return sign * flux / tidal_depth(xx, yy, t), 0.0 * xx

    xx, yy = np.meshgrid(X, Y)
    depth = np.stack([tidal_depth(xx, yy, t) for t in TIMES])
    return grid_flow(X, Y, TIMES, velocity, depth=depth)


TIDAL_S, TIDAL_D = (-2000.0, -1600.0), (870.0, -1070.0)


def test_tidal_flow_conserves_volume():
    # The frames the engine reads meet ∂h/∂t + ∂(hu)/∂x = 0: hu is linear in x, so its
    # finite difference along x is exact to rounding; the central difference of h over two frame
    # intervals Δt errs by at most a ω³ Δt² / 6 (Taylor remainder, common practice).
    flow = tidal_flow()
    hu = flow.u.data * flow.depth.data
    k = 10
    dt = TIMES[1] - TIMES[0]
    dhdt = (flow.depth.data[k + 1] - flow.depth.data[k - 1]) / (2 * dt)
    dfdx = np.gradient(hu[k], X, axis=1)
    bound = AMPLITUDE * OMEGA**3 * dt**2 / 6 + 1e-12
    assert np.max(np.abs(dhdt + dfdx)) < bound
    assert np.max(np.abs(dhdt)) > 100 * bound  # the depth does change with the tide


@pytest.fixture(scope="module")
def tidal_forward():
    return forward_at(tidal_flow(), TIDAL_S, TIDAL_D, 0.0, TIDAL_T, PARTICLES, seed=21)


def test_duality_on_a_tidal_flow_with_varying_depth(tidal_forward):
    backward = backward_at(tidal_flow(), TIDAL_S, TIDAL_D, 0.0, TIDAL_T, PARTICLES, seed=22)
    assert tidal_forward[1] > 500 and backward[1] > 500
    assert abs(standard_errors(tidal_forward, backward)) < 5.0


def test_tidal_duality_fails_when_advection_is_not_reversed(tidal_forward):
    backward = backward_at(tidal_flow(-1.0), TIDAL_S, TIDAL_D, 0.0, TIDAL_T, PARTICLES, seed=22)
    assert abs(standard_errors(tidal_forward, backward)) > 5.0


# (c) A geographic grid (degrees; the engine steps in metres with the WGS84 radii of curvature):
# u uniform, the depth growing northward and v = q/h with a constant flux q northward; steady,
# so ∇·(hu) = u ∂h/∂x + ∂q/∂y = 0.
LON = np.linspace(0.0, 0.16, 81)
LAT = np.linspace(50.0, 50.06, 31)
GEO_GRID = OutputGrid(x0=0.001, dx=0.002, nx=80, y0=50.001, dy=0.002, ny=30)


def geographic_depth(lat):
    return 2.0 + 200.0 * (lat - 50.0)  # 2 m to 14 m


def geographic_flow(sign=1.0):
    depth = geographic_depth(np.meshgrid(LON, LAT)[1])
    flow = grid_flow(
        LON,
        LAT,
        [0.0],
        lambda xx, yy, t: (sign * 0.2 + 0.0 * xx, sign * 0.1 / geographic_depth(yy)),
        depth,
    )
    return dataclasses.replace(flow, geographic=True)


GEO_S, GEO_D, GEO_T = (0.03, 50.012), (0.072, 50.022), 4 * HOUR
GEO_TRANSPORT = Transport(dt=60.0, dispersion=Dispersion(k1=10.0, k2=10.0), edges=EDGES)


def geographic_pair(flow_for_backward):
    flow = geographic_flow()
    release = Release("circle", np.array([GEO_S]), PARTICLES, start=0.0, radius=RADIUS)
    receptor = Receptor("D", *GEO_D, radius=RADIUS)
    counter = PlaceCounts([receptor], GEO_GRID, flow, 2)
    ds = simulate(
        flow,
        GEO_TRANSPORT,
        [release],
        start=0.0,
        end=GEO_T,
        output_interval=GEO_T,
        output_grid=GEO_GRID,
        receptors=[receptor],
        seed=31,
        on_output=counter,
    )
    forward = float(ds["receptor_concentration"].values[0, -1]), float(counter.counts[0, -1])
    back = backward_run(
        flow_for_backward,
        GEO_TRANSPORT,
        Detection("D", *GEO_D, GEO_T, GEO_T, value=1.0, radius=RADIUS),
        [Candidate("S", *GEO_S, 0.0, 0.0, radius=RADIUS)],
        start=0.0,
        end=GEO_T,
        output_interval=GEO_T,
        output_grid=GEO_GRID,
        particles=PARTICLES,
        seed=32,
    )
    backward = float(back["place_influence"].values[0, 0]), float(back["place_count"].values[0, 0])
    return forward, backward


def test_duality_on_a_geographic_grid():
    forward, backward = geographic_pair(geographic_flow())
    assert forward[1] > 500 and backward[1] > 500
    assert abs(standard_errors(forward, backward)) < 5.0


def test_geographic_duality_fails_when_advection_is_not_reversed():
    forward, backward = geographic_pair(geographic_flow(-1.0))
    assert abs(standard_errors(forward, backward)) > 5.0
