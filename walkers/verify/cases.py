"""Verification cases: the engine against published closed-form results.

Each case runs the engine on a problem with a known answer and returns checks, each with the
measured value, the expected value, a tolerance derived from sampling theory (Z = 5 standard
errors, or the two-sided 5-sigma level p = 5.7e-7 for distribution tests) or from a stated error
bound, and the source. Keyword overrides (e.g. ``dispersion_factor=1.1``, ``drift=False``) make
the run deliberately wrong while the expectation stays right; the tests use them to show every
check can fail.

``walkers verify`` runs all cases and prints the table; ``--report`` writes it as Markdown.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import stats

from walkers.engine.state import EXITED, IN_WATER, ParticleState
from walkers.fields.analytic import analytic_flow, grid_flow
from walkers.fields.base import centre_to_edges
from walkers.run import reduce
from walkers.run.simulate import RunState, simulate
from walkers.scenario.config import Dispersion, OutputGrid, Release, Transport
from walkers.verify import analytic
from walkers.verify.checks import (
    FISCHER,
    P_FIVE_SIGMA,
    CaseResult,
    Check,
    Z,
    box_error_check,
    evolve,
    ks_check,
    mean_check,
    variance_check,
)
from walkers.verify.coast import COAST_CASES
from walkers.verify.curvilinear import CURVILINEAR_CASES
from walkers.verify.mesh import MESH_CASES


def _final_state(flow, transport, releases, end, interval, grid, seed):
    captured: list[RunState] = []
    ds = simulate(
        flow,
        transport,
        releases,
        start=0.0,
        end=end,
        output_interval=interval,
        output_grid=grid,
        seed=seed,
        on_output=captured.append,
    )
    return ds, captured[-1].particles


def case_point_1d(particles: int, seed: int, dispersion_factor: float = 1.0) -> CaseResult:
    """Point release in a uniform 1-D channel flow."""
    u, k, area, t_end, mass = 0.5, 5.0, 50.0, 3600.0, 1.0
    flow = analytic_flow("uniform", u=u, x_range=(-3000.0, 9000.0), nx=601, depth=area, ndim=1)
    tr = Transport(dt=20.0, dispersion=Dispersion(k1=k * dispersion_factor))
    sigma = math.sqrt(2 * k * t_end)
    centre = u * t_end
    result = CaseResult("point-1d", "Point release, uniform flow, 1-D channel", particles)
    errors = []
    for n in (max(particles // 16, 64), max(particles // 4, 256), particles):
        dx = 20.0
        grid = OutputGrid(x0=centre - 6 * sigma, dx=dx, nx=int(12 * sigma / dx) + 1)
        rel = [Release("point", np.array([[0.0, 0.0]]), n, mass=mass)]
        ds, st = _final_state(flow, tr, rel, t_end, t_end, grid, seed)
        edges = grid.x0 + dx * (np.arange(grid.nx + 1) - 0.5)
        p = np.diff(stats.norm.cdf(edges, centre, sigma))
        cell_mean = mass * p / (area * dx)
        conc = ds.concentration.values[-1, 0]
        chk = box_error_check(
            f"concentration rel. L2 error, N={n}", conc, cell_mean, mass / (area * dx), n, FISCHER
        )
        errors.append((n, chk.measured))
        result.checks.append(chk)
    x = st.x[st.status == IN_WATER]
    result.checks += [
        mean_check("centroid x (m)", x, centre, sigma, FISCHER),
        variance_check("variance x (m2)", x, 2 * k * t_end, FISCHER),
        ks_check("KS distance to the normal law", x, stats.norm(centre, sigma).cdf, FISCHER),
    ]
    slope = np.polyfit(np.log([e[0] for e in errors]), np.log([e[1] for e in errors]), 1)[0]
    result.checks.append(
        Check("error slope d(log E)/d(log N) (reported)", float(slope), -0.5, 0.25, FISCHER)
    )
    return result


def case_point_2d(particles: int, seed: int, dispersion_factor: float = 1.0) -> CaseResult:
    """Point release in uniform 2-D flow with different dispersion along x and y."""
    u, v, kx, ky, h, t_end, mass = 0.3, 0.1, 2.0, 1.0, 8.0, 3600.0, 1.0
    flow = analytic_flow(
        "uniform",
        u=u,
        v=v,
        x_range=(-4000.0, 8000.0),
        y_range=(-4000.0, 4000.0),
        nx=121,
        ny=81,
        depth=h,
    )
    tr = Transport(dt=60.0, dispersion=Dispersion(k1=kx * dispersion_factor, k2=ky))
    sx, sy = math.sqrt(2 * kx * t_end), math.sqrt(2 * ky * t_end)
    cx, cy = u * t_end, v * t_end
    d = 25.0
    grid = OutputGrid(
        x0=cx - 5 * sx, dx=d, nx=int(10 * sx / d) + 1, y0=cy - 5 * sy, dy=d, ny=int(10 * sy / d) + 1
    )
    rel = [Release("point", np.array([[0.0, 0.0]]), particles, mass=mass)]
    ds, st = _final_state(flow, tr, rel, t_end, t_end, grid, seed)
    water = st.status == IN_WATER
    x, y = st.x[water], st.y[water]
    ex = grid.x0 + d * (np.arange(grid.nx + 1) - 0.5)
    ey = grid.y0 + d * (np.arange(grid.ny + 1) - 0.5)
    p = np.outer(np.diff(stats.norm.cdf(ey, cy, sy)), np.diff(stats.norm.cdf(ex, cx, sx)))
    result = CaseResult("point-2d", "Point release, uniform flow, 2-D, Kx ≠ Ky", particles)
    result.checks += [
        mean_check("centroid x (m)", x, cx, sx, FISCHER),
        mean_check("centroid y (m)", y, cy, sy, FISCHER),
        variance_check("variance x (m2)", x, 2 * kx * t_end, FISCHER),
        variance_check("variance y (m2)", y, 2 * ky * t_end, FISCHER),
        ks_check("KS distance, x", x, stats.norm(cx, sx).cdf, FISCHER),
        ks_check("KS distance, y", y, stats.norm(cy, sy).cdf, FISCHER),
        box_error_check(
            "concentration rel. L2 error",
            ds.concentration.values[-1],
            mass * p / (h * d * d),
            mass / (h * d * d),
            particles,
            FISCHER,
        ),
    ]
    return result


def case_reflecting_wall(particles: int, seed: int, wall: str = "reflecting") -> CaseResult:
    """Release near a reflecting domain edge (1-D) and near a gridded coast (2-D land cells)."""
    k, x0, t_end = 1.0, 50.0, 1800.0
    sigma = math.sqrt(2 * k * t_end)
    src = (
        "Carslaw & Jaeger 1959, Conduction of Heat in Solids, §2.2, method of images (from memory)"
    )
    result = CaseResult("reflecting-wall", "Reflecting wall: edge and gridded coast", particles)
    flow = analytic_flow("uniform", x_range=(5.0, 1995.0), nx=199, depth=10.0, ndim=1)
    edges = {"west": wall, "east": "reflecting", "south": "reflecting", "north": "reflecting"}
    tr = Transport(dt=10.0, dispersion=Dispersion(k1=k, k2=k), edges=edges)
    st = ParticleState.from_arrays(
        np.full(particles, x0), np.zeros(particles), np.ones(particles), np.zeros(particles)
    )
    st = evolve(flow, tr, st, 0.0, t_end, seed)
    x = st.x[st.status == IN_WATER]
    cdf = lambda v: analytic.reflected_normal_cdf(v, x0=x0, sigma=sigma)  # noqa: E731
    result.checks.append(Check("particles kept (fraction)", len(x) / particles, 1.0, 0.0, src))
    result.checks.append(ks_check("KS distance to images law, domain edge", x, cdf, src))
    # The same wall made of land cells inside a 2-D grid.
    xc = np.arange(-195.0, 2000.0, 10.0)
    yc = np.arange(-995.0, 1000.0, 10.0)
    wet = np.broadcast_to(xc >= 0.0, (yc.size, xc.size)) if wall == "reflecting" else None
    coast = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0 * X, 0 * X), depth=10.0, wet=wet)
    tr2 = Transport(
        dt=10.0, dispersion=Dispersion(k1=k, k2=k), edges=dict.fromkeys(edges, "reflecting")
    )
    st2 = ParticleState.from_arrays(
        np.full(particles, x0), np.zeros(particles), np.ones(particles), np.zeros(particles)
    )
    st2 = evolve(coast, tr2, st2, 0.0, t_end, seed + 1)
    result.checks.append(
        ks_check("KS distance to images law, land cells", st2.x[st2.status == IN_WATER], cdf, src)
    )
    return result


def case_absorbing_edge(particles: int, seed: int, velocity_factor: float = 1.0) -> CaseResult:
    """Arrival at an absorbing downstream edge: the inverse Gaussian first-passage law."""
    u, k, distance, t_end = 0.2, 2.0, 2000.0, 20000.0
    src = (
        "Cox & Miller 1965, The Theory of Stochastic Processes, §5.7 (from memory); "
        "scipy.stats.invgauss"
    )
    law = analytic.first_passage(distance, u, k)
    flow = analytic_flow(
        "uniform", u=u * velocity_factor, x_range=(-4995.0, 1995.0), nx=700, depth=10.0, ndim=1
    )
    edges = {
        "west": "reflecting",
        "east": "absorbing",
        "south": "reflecting",
        "north": "reflecting",
    }
    tr = Transport(dt=10.0, dispersion=Dispersion(k1=k), edges=edges)
    st = ParticleState.from_arrays(
        np.zeros(particles), np.zeros(particles), np.ones(particles), np.zeros(particles)
    )
    st = evolve(flow, tr, st, 0.0, t_end, seed)
    arrivals = np.where(st.status == EXITED + 1, st.exit_time, np.inf)
    result = CaseResult("absorbing-edge", "Absorbing downstream edge: first passage", particles)
    for q in (0.1, 0.5, 0.9):
        t = float(law.ppf(q))
        frac = float(np.mean(arrivals <= t))
        se = math.sqrt(q * (1 - q) / particles)
        result.checks.append(Check(f"fraction gone by {t:.0f} s", frac, q, Z * se, src))
    gone = arrivals[np.isfinite(arrivals)]
    result.checks.append(ks_check("KS distance of arrival times", gone, law.cdf, src))
    return result


def case_well_mixed_k(particles: int, seed: int, drift: bool = True) -> CaseResult:
    """A well-mixed tracer stays well mixed where K varies along a closed channel."""
    length, t_end = 1000.0, 20000.0
    xc = np.arange(5.0, length, 10.0)
    kfield = (1.0 + 0.8 * np.cos(2 * np.pi * xc / length))[None, :]
    flow = grid_flow(xc, [0.0], [0.0], lambda X, Y, t: (0 * X, 0 * X), depth=20.0, ndim=1)
    tr = Transport(
        dt=20.0,
        dispersion=Dispersion(k1_field=kfield),
        edges=dict.fromkeys(("west", "east", "south", "north"), "reflecting"),
        drift_correction=drift,
    )
    x0 = (np.arange(particles) + 0.5) / particles * length
    st = ParticleState.from_arrays(x0, np.zeros(particles), np.ones(particles), np.zeros(particles))
    st = evolve(flow, tr, st, 0.0, t_end, seed)
    counts = np.histogram(st.x, bins=20, range=(0.0, length))[0]
    src = "Hunter, Craig & Phillips 1993, J. Comput. Phys. 106; Visser 1997, MEPS 158 (from memory)"
    p = stats.chisquare(counts).pvalue
    result = CaseResult("well-mixed-k", "Well-mixed condition, K(x) varying", particles)
    result.checks.append(
        Check(
            "chi-square p-value of uniformity (>= 5-sigma level)",
            float(p),
            1.0,
            P_FIVE_SIGMA,
            f"{src}; scipy.stats.chisquare",
            kind="min",
        )
    )
    return result


def case_well_mixed_depth(particles: int, seed: int, drift: bool = True) -> CaseResult:
    """Uniform concentration stays uniform over a bed whose depth varies."""
    length, width, t_end = 1000.0, 200.0, 20000.0
    xc = np.arange(5.0, length, 10.0)
    yc = np.arange(5.0, width, 10.0)
    depth = np.broadcast_to(5.0 + 3.0 * np.cos(2 * np.pi * xc / length), (yc.size, xc.size))
    flow = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0 * X, 0 * X), depth=depth)
    tr = Transport(
        dt=20.0,
        dispersion=Dispersion(k1=1.0, k2=1.0),
        edges=dict.fromkeys(("west", "east", "south", "north"), "reflecting"),
        drift_correction=drift,
    )
    rng = np.random.default_rng(seed)
    x0 = rng.uniform(0.0, length, particles)
    y0 = rng.uniform(0.0, width, particles)
    h0 = 5.0 + 3.0 * np.cos(2 * np.pi * x0 / length)
    # Uniform concentration C0 = 1: each particle carries the water volume it stands for.
    mass = h0 * length * width / particles
    st = evolve(
        flow, tr, ParticleState.from_arrays(x0, y0, mass, np.zeros(particles)), 0.0, t_end, seed
    )
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    depths = reduce.particle_depths(st, flow.depth.data[0], xe, ye)
    w = st.mass / depths
    idx = np.clip(((st.x - 0.0) // 100.0).astype(int), 0, 9)
    sums = np.bincount(idx, weights=w, minlength=10) / (100.0 * width)
    se = np.sqrt(np.bincount(idx, weights=w * w, minlength=10)) / (100.0 * width)
    worst = float(np.max(np.abs(sums - 1.0) / se))
    src = "Dimou & Adams 1993, Estuar. Coast. Shelf Sci. 37; Heemink 1990 (from memory)"
    result = CaseResult("well-mixed-depth", "Well-mixed condition, depth h(x) varying", particles)
    result.checks.append(
        Check("largest |C − 1| over 10 bands, in standard errors", worst, 0.0, Z, src)
    )
    return result


def case_shear(particles: int, seed: int, shear_factor: float = 1.0) -> CaseResult:
    """Point release in linear shear u = γ y: streamwise variance 2Kt(1 + γ²t²/3)."""
    gamma, k, t_end = 1e-3, 1.0, 3600.0
    flow = analytic_flow(
        "shear",
        shear=gamma * shear_factor,
        x_range=(-3000.0, 3000.0),
        y_range=(-1000.0, 1000.0),
        nx=121,
        ny=41,
    )
    tr = Transport(dt=10.0, dispersion=Dispersion(k1=k, k2=k))
    st = ParticleState.from_arrays(
        np.zeros(particles), np.zeros(particles), np.ones(particles), np.zeros(particles)
    )
    st = evolve(flow, tr, st, 0.0, t_end, seed)
    var_x = analytic.shear_variance(t_end, k=k, shear=gamma)
    src = "shear dispersion of a point release, σx² = 2Kt(1 + γ²t²/3) (from memory)"
    result = CaseResult("shear", "Linear shear flow u = γy", particles)
    result.checks += [
        variance_check("variance x (m2)", st.x, var_x, src),
        variance_check("variance y (m2)", st.y, 2 * k * t_end, src),
        mean_check("centroid x (m)", st.x, 0.0, math.sqrt(var_x), src),
        ks_check("KS distance, x", st.x, stats.norm(0.0, math.sqrt(var_x)).cdf, src),
    ]
    return result


def case_decay_budget(particles: int, seed: int, decay_factor: float = 1.0) -> CaseResult:
    """First-order decay of a continuous release; the mass budget closes."""
    rate_k, q, duration, t_end = 1e-4, 0.01, 3600.0, 3 * 3600.0
    flow = analytic_flow(
        "uniform", u=0.1, x_range=(-20000.0, 20000.0), y_range=(-5000.0, 5000.0), nx=81, ny=21
    )
    tr = Transport(dt=60.0, dispersion=Dispersion(k1=1.0, k2=1.0), decay_rate=rate_k * decay_factor)
    rel = [
        Release("point", np.array([[0.0, 0.0]]), particles, duration=duration, mass=q * duration)
    ]
    grid = OutputGrid(x0=-2000.0, dx=100.0, nx=40, y0=-1000.0, dy=100.0, ny=20)
    ds, _ = _final_state(flow, tr, rel, t_end, 600.0, grid, seed)
    # Mass left in water from a constant rate q over [0, D], observed at T:
    # q/k (1 − e^{−kD}) e^{−k(T − D)} (integral of q e^{−k(T − s)} ds).
    expected = (
        q / rate_k * (1 - math.exp(-rate_k * duration)) * math.exp(-rate_k * (t_end - duration))
    )
    delta = duration / particles
    midpoint_bound = expected * (rate_k * delta) ** 2 / 24.0 + 1e-12 * expected
    src = "first-order decay M0·exp(−kt) (Fischer et al. 1979, from memory)"
    residual = (
        ds.budget_released
        - ds.budget_in_water
        - ds.budget_outflow.sum("edge")
        - ds.budget_decayed
        - ds.budget_held_dry
    )
    result = CaseResult("decay-budget", "Decay of a continuous release; mass budget", particles)
    result.checks += [
        Check(
            "mass in water at end (kg)",
            float(ds.budget_in_water[-1]),
            expected,
            midpoint_bound,
            src + "; midpoint-rule error bound for stratified release times",
        ),
        Check(
            "mass released (kg) = rate × duration",
            float(ds.budget_released[-1]),
            q * duration,
            1e-12 * q * duration,
            "definition of a constant-rate release",
        ),
        Check(
            "largest budget residual / released",
            float(np.abs(residual).max() / (q * duration)),
            0.0,
            1e-12,
            "mass conservation (round-off)",
        ),
    ]
    return result


def case_tidal(particles: int, seed: int, frame_interval: float = 600.0) -> CaseResult:
    """Centroid in a uniform tidal flow follows u0 t + a T/(2π) sin(2πt/T)."""
    u0, amp, period, t_end = 0.1, 1.0, 44712.0, 44712.0
    flow = analytic_flow(
        "tidal",
        u=u0,
        amplitude=amp,
        period=period,
        duration=t_end + 3600.0,
        frame_interval=frame_interval,
        x_range=(-20000.0, 20000.0),
        y_range=(-2000.0, 2000.0),
        nx=41,
        ny=5,
    )
    tr = Transport(dt=72.0, dispersion=Dispersion(k1=0.0, k2=0.0), scheme="rk4")
    n = min(particles, 100)
    st = ParticleState.from_arrays(np.zeros(n), np.zeros(n), np.ones(n), np.zeros(n))
    st = evolve(flow, tr, st, 0.0, t_end, seed)
    w = 2 * np.pi / period
    bound = amp * w**2 * 600.0**2 / 8.0 * t_end  # linear interpolation error bound × time
    result = CaseResult("tidal", "Uniform tidal flow, linear interpolation in time", n)
    result.checks.append(
        Check(
            "displacement (m)",
            float(np.mean(st.x)),
            float(analytic.tidal_displacement(t_end, u0=u0, amplitude=amp, period=period)),
            bound,
            "∫(u0 + a cos ωt) dt; interpolation error ≤ aω²Δt²/8 (common practice)",
        )
    )
    return result


def case_rotation(particles: int, seed: int, scheme: str = "rk4") -> CaseResult:
    """Solid-body rotation: RK4 keeps the radius, Euler grows it by (1 + (Ωdt)²)^{n/2}."""
    omega, r0, dt = 2 * np.pi / 86400.0, 1000.0, 600.0
    nsteps = 144
    flow = analytic_flow(
        "rotation",
        angular_velocity=omega,
        x_range=(-3000.0, 3000.0),
        y_range=(-3000.0, 3000.0),
        nx=61,
        ny=61,
    )
    result = CaseResult("rotation", "Solid-body rotation, Euler and RK4", 1)
    for label, name in (("euler", "euler"), ("rk4", scheme)):
        tr = Transport(dt=dt, dispersion=Dispersion(k1=0.0, k2=0.0), scheme=name)
        st = ParticleState.from_arrays(np.array([r0]), np.array([0.0]), np.ones(1), np.zeros(1))
        st = evolve(flow, tr, st, 0.0, nsteps * dt, seed)
        r = float(np.hypot(st.x[0], st.y[0]))
        z = omega * dt
        if label == "euler":
            expected = r0 * (1 + z**2) ** (nsteps / 2)
            result.checks.append(
                Check(
                    "Euler radius (m)",
                    r,
                    expected,
                    1e-9 * r0,
                    "Euler on a linear rotation: exact growth factor",
                )
            )
        else:
            # RK4 on rotation: |amplification| = |1 - z²/2 + z⁴/24 + i(z - z³/6)|, z = Ωdt.
            g = abs(complex(1 - z**2 / 2 + z**4 / 24, z - z**3 / 6))
            result.checks.append(
                Check(
                    "RK4 radius (m)",
                    r,
                    r0 * g**nsteps,
                    1e-9 * r0,
                    "RK4 stability function (Butcher 2008, from memory)",
                )
            )
    return result


CASES: dict[str, tuple[Callable[..., CaseResult], int]] = {
    "point-1d": (case_point_1d, 40000),
    "point-2d": (case_point_2d, 40000),
    "reflecting-wall": (case_reflecting_wall, 20000),
    "absorbing-edge": (case_absorbing_edge, 20000),
    "well-mixed-k": (case_well_mixed_k, 40000),
    "well-mixed-depth": (case_well_mixed_depth, 40000),
    "shear": (case_shear, 40000),
    "decay-budget": (case_decay_budget, 4000),
    "tidal": (case_tidal, 10),
    "rotation": (case_rotation, 1),
    **COAST_CASES,
    **CURVILINEAR_CASES,
    **MESH_CASES,
}


def run_case(name: str, particles: int | None = None, seed: int = 20261201, **wrong) -> CaseResult:
    """Run one verification case (``wrong`` overrides make the run deliberately wrong)."""
    func, default = CASES[name]
    return func(int(particles or default), seed, **wrong)
