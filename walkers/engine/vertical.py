"""The vertical step of particles in a water column (compiled; numpy twin in ``vertical_twin``).

Coordinate. A particle's place in its column is ``sigma``, its height above the bed as a fraction
of the local water depth h (0 on the bed, 1 at the surface; not the CF ``ocean_sigma_coordinate``,
which runs from -1 to 0). The step works in z = sigma h (m above the bed) with the depth of the
particle's cell at the start of the step, and stores z / h again, so a particle that moves into a
shallower or deeper column, or whose column fills or drains with the tide, keeps its fraction of
the depth: a tracer uniform in the vertical stays uniform whatever h does.

Horizontal motion is that of the depth-averaged step (the velocity is the depth mean at every
height: the core of the three-dimensional step, without vertical shear of the horizontal flow).

Vertical diffusivity (``mode``):

    1 constant:   K_z = K0
    2 parabolic:  K_z = κ u* z (1 − z/h),  κ = 0.41
                  (the eddy viscosity of the logarithmic profile with a parabolic shear stress,
                  used as diffusivity with a turbulent Schmidt number of 1; common practice)

The step is Visser's (1997, "Using random walk models to simulate the vertical distribution of
particles in a turbulent water column", Mar. Ecol. Prog. Ser. 158, 275-281):

    z' = z + (dK/dz(z) − w_s) Δt + R sqrt(2 K(z + ½ dK/dz(z) Δt) Δt)

with R a standard normal deviate and w_s the settling velocity (m s-1, > 0 down, < 0 rising).
Without the drift dK/dz the particles gather where K is low (the test's twin that fails). Visser
asks Δt ≪ 1/max|d²K/dz²|; for the parabolic profile |d²K/dz²| = 2 κ u*/h, and each particle's
step is split into substeps of at most f h / (2 κ u*) in its own column, f the scenario's
``vertical.substep_fraction`` (default VISSER_FRACTION, 0.01; ``params[P_FRACTION]``;
:func:`column_longest`; ``kernels.column_walk``).

Boundaries: the surface reflects; the bed reflects, or, with a deposition velocity w_d > 0, a
particle whose step ends below the bed deposits with probability

    P = w_d sqrt(π Δt / K)

(K the diffusivity of its step) and is reflected otherwise; that is the partially reflecting
boundary of a Gaussian random walk that realises the flux condition K ∂C/∂z = w_d C at the bed
(Erban & Chapman 2007, "Reactive boundary conditions for stochastic simulations of
reaction-diffusion processes", Phys. Biol. 4, 16-28, from memory; to first order in P). A particle
that reaches the bed by settling alone (K = 0) deposits with probability w_d / w_s, the fraction
of the settling flux that stays (common practice). A deposited particle has the status "on the
bed" and is no longer moved.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from walkers.engine.coefficients import GRAVITY
from walkers.engine.kernels import JIT
from walkers.errors import InputError
from walkers.scenario.config import VISSER_FRACTION

#: von Kármán's constant (common practice; the value of walkers.engine.coefficients' Elder law).
KAPPA = 0.41
#: Reflections of one step at the bed and the surface before the end is clamped into the column.
MAX_COLUMN_REFLECTIONS = 8
#: Diffusivity modes (the ``vertical`` option of ``kernels.compiled_mover``).
VERTICAL_OFF = 0
KZ_CONSTANT = 1
KZ_PARABOLIC = 2
KZ_FILE = 3
#: Entries of ``column_params``.
P_MODE, P_K0, P_WD, P_DRIFT, P_FRACTION, P_TAU_C, P_EROSION, P_RHO, P_LOG_A, P_LOG_B = range(10)
#: Depth (m) below which a column is too shallow to step in; sigma is kept.
MIN_COLUMN_DEPTH = 1e-3
#: Columns shallower than this (m; drying banks) may need more substeps than the kernel allows:
#: they are held to MAX_SUBSTEPS, and the step check looks only at deeper ones.
SHALLOW_COLUMN = 0.1


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def cell_frame_value(arr, it, wt, j, i):
    """Value (j, i) of (nf, ny, nx) frames, linear in time between frames it and it+1 (a single
    frame as is; at wt = 1 frame it+1 itself, so that the twin, which locates a time on a frame
    as (it+1, 0), finds the same bits: u* near 0 enters the step through a square root)."""
    # unsigned indices (never negative here): no wrap-around of negative ones
    uj = np.uint64(j)
    ui = np.uint64(i)
    if arr.shape[0] == 1:
        return arr[0, uj, ui]
    t0 = np.uint64(it)
    t1 = t0 + np.uint64(1)
    if wt >= 1.0:
        return arr[t1, uj, ui]
    f = arr[t0, uj, ui]
    if wt > 0.0:
        f = f + wt * (arr[t1, uj, ui] - f)
    return f


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def layer_frame_value(arr, nl, q, it, wt, j, i):
    """Value (j, i) of level q of (nf nl or nl, ny, nx) frames whose levels are flattened into
    the frame axis (frame f level q at f nl + q), linear in time with the arithmetic of
    :func:`cell_frame_value` (nl = 1: that function's result)."""
    if arr.shape[0] == nl:
        return arr[q, j, i]
    if wt >= 1.0:
        return arr[(it + 1) * nl + q, j, i]
    f = arr[it * nl + q, j, i]
    if wt > 0.0:
        f = f + wt * (arr[(it + 1) * nl + q, j, i] - f)
    return f


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def profile_at(levels, values, row, s):
    """A profile given at ascending heights ``levels`` (fractions of the depth), row ``row`` of
    ``values`` (rows, levels), at height s: (value, d value / d s), linear between levels, the
    end value (slope 0) beyond them."""
    n = levels.shape[0]
    if n == 1 or s <= levels[0]:
        return values[row, 0], 0.0
    if s >= levels[n - 1]:
        return values[row, n - 1], 0.0
    k = 0
    while levels[k + 1] <= s:
        k += 1
    g = (values[row, k + 1] - values[row, k]) / (levels[k + 1] - levels[k])
    return values[row, k] + g * (s - levels[k]), g


@nb.njit(inline="always", **JIT)  # type: ignore[call-overload]  # JIT is a plain dict
def column_step(
    z, depth, inv_depth, ustar, ws, params, dt, r, klev, kcols, wlev, wcols, row, mode, with_w
):
    """One vertical step of a particle (Visser 1997; see the module docstring).

    z : height above the bed (m); depth h (m, at least MIN_COLUMN_DEPTH) and inv_depth =
    1/h; ustar u* (m s-1, parabolic mode); ws : settling velocity (m s-1, > 0 down);
    params : ``column_params`` (K0 (m2 s-1), w_d (m s-1), drift factor (1; 0 removes the
    drift, for tests), ...); dt : step (s); r : standard normal deviate;
    klev, kcols : K_z (m2 s-1) of the particle's column, row ``row`` of kcols, at heights
    klev (fractions of the depth, ascending; mode 3), linear between them;
    wlev, wcols : the vertical velocity w (m s-1, > 0 up) of the column, row ``row`` of
    wcols, at heights wlev (with_w), linear between them.

    mode, with_w : the K_z mode and whether w is given: constants of the compiled step (the
    function is inlined, so the branches of the other modes are removed).

    Returns (z', P): the new height (m) and the probability that the particle deposits in
    this step (0 unless its step ended below a depositing bed). The walk of a step stays in
    z and multiplies by 1/h (no division on the substeps' chain).
    """
    if mode == KZ_CONSTANT:
        dk = 0.0
        k = params[1]
    elif mode == KZ_FILE:
        g = profile_at(klev, kcols, row, z * inv_depth)[1]
        dk = g * inv_depth * params[3]
        zm = min(max(z + 0.5 * dk * dt, 0.0), depth)
        k = max(profile_at(klev, kcols, row, zm * inv_depth)[0], 0.0)
    else:
        a = KAPPA * ustar
        dk = a * (1.0 - 2.0 * z * inv_depth) * params[3]
        zm = min(max(z + 0.5 * dk * dt, 0.0), depth)
        k = a * zm * (1.0 - zm * inv_depth)
    if with_w:
        w = profile_at(wlev, wcols, row, z * inv_depth)[0]
        zn = z + (dk - ws + w) * dt + r * math.sqrt(2.0 * k * dt)
    else:
        zn = z + (dk - ws) * dt + r * math.sqrt(2.0 * k * dt)
    below = False
    for _ in range(MAX_COLUMN_REFLECTIONS):
        if zn < 0.0:
            zn = -zn
            below = True
        elif zn > depth:
            zn = 2.0 * depth - zn
        else:
            break
    zn = min(max(zn, 0.0), depth)
    chance = 0.0
    wd = params[2]
    if below and wd > 0.0:
        if k > 0.0:
            chance = min(wd * math.sqrt(math.pi * dt / k), 1.0)
        elif ws > 0.0:
            chance = min(wd / ws, 1.0)
        else:
            chance = 1.0
    return zn, chance


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def profile_curvature(depth, klev, kcols, row):
    """The largest |d²K_z/dz²| (s-1) of a piecewise linear K_z profile (row ``row`` of kcols) at
    heights klev (fractions of the depth h, m): at each inner level, the change of slope over
    half the distance between its neighbours; 0 for fewer than three levels."""
    worst = 0.0
    for q in range(1, klev.shape[0] - 1):
        below = (kcols[row, q] - kcols[row, q - 1]) / ((klev[q] - klev[q - 1]) * depth)
        above = (kcols[row, q + 1] - kcols[row, q]) / ((klev[q + 1] - klev[q]) * depth)
        c = abs(above - below) / (0.5 * (klev[q + 1] - klev[q - 1]) * depth)
        worst = max(worst, c)
    return worst


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def resuspension_chance(ustar, params, dt):
    """Probability that a particle on the bed returns to the water in a step of dt seconds.

    Partheniades (1965, "Erosion and deposition of cohesive soils", J. Hydraul. Div. ASCE 91,
    from memory) gives the erosion flux E = M (τ/τ_c − 1) (kg m-2 s-1) for a bed shear stress
    τ = ρ u*² above the critical τ_c, 0 below. The probability form is ours: a bed of erodible
    mass B (kg m-2) eroded at E loses each of its particles at the rate λ = E / B =
    M_e (τ/τ_c − 1) with M_e = M / B (s-1, ``params[P_EROSION]``), every particle alike and
    independently; over a step with τ held, a particle's waiting time is exponential, so it
    leaves with P = 1 − exp(−λ Δt), and the mass on the bed decays as exp(−λ t) (the first-order
    law the tests check)."""
    tau_c = params[5]
    if not tau_c > 0.0:
        return 0.0
    tau = params[7] * ustar * ustar
    if not tau > tau_c:
        return 0.0
    return -math.expm1(-params[6] * (tau / tau_c - 1.0) * dt)


def column_params(
    mode: int,
    kz: float = 0.0,
    deposition_velocity: float = 0.0,
    critical_shear_stress: float = 0.0,
    erosion_rate: float = 0.0,
    water_density: float = 1025.0,
    bed_log: tuple[float, float] = (0.0, 0.0),
    substep_fraction: float = VISSER_FRACTION,
) -> np.ndarray:
    """The ``params`` array of :func:`column_step` (indices ``P_*``): (mode, K0 (m2 s-1), w_d
    (m s-1), drift factor 1, Visser's fraction of 1/|d²K_z/dz²| that a substep may last
    (``substep_fraction``), τ_c (Pa; 0 no resuspension), M_e (s-1), ρ (kg m-3), and the (a, b)
    of :func:`bed_log_law`; see :func:`resuspension_chance`)."""
    return np.array(
        [
            float(mode),
            float(kz),
            float(deposition_velocity),
            1.0,
            float(substep_fraction),
            float(critical_shear_stress),
            float(erosion_rate),
            float(water_density),
            float(bed_log[0]),
            float(bed_log[1]),
        ],
        np.float64,
    )


def bed_log_law(manning_n: float | None, drag_coefficient: float | None) -> tuple[float, float]:
    """(a, b) of ln(h/z0) = 1 + a h^b (h in m): the roughness length z0 of the law of the wall
    that layered velocities follow below their lowest layer centre (``kernels.bed_log_ratio``),
    from the bed roughness that gives u* (``coefficients.shear_velocity``).

    The depth-averaged law of the wall, U/u* = (1/κ)(ln(h/z0) − 1), is C_d = [κ/(ln(h/z0) −
    1)]² (Soulsby 1997, Dynamics of marine sands, §3.3, from memory); with u* = √C_d U,
    ln(h/z0) = 1 + κ/√C_d: a = κ/√C_d, b = 0; with Manning's u* = n U √g / h^(1/6),
    a = κ/(n √g), b = 1/6. z0 then depends on the roughness and the depth, not on the speed, and
    the profile's bed stress is the one u* stands for. No roughness (neither given): (0, 0), the
    lowest layer's value down to the bed."""
    if drag_coefficient is not None:
        return KAPPA / math.sqrt(drag_coefficient), 0.0
    if manning_n is not None:
        return KAPPA / (manning_n * math.sqrt(GRAVITY)), 1.0 / 6.0
    return 0.0, 0.0


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def column_longest(depth, ustar, params):
    """The longest vertical substep (s) in a column of depth h (m) with bed shear velocity u*
    (m s-1): params[4] / |d²K_z/dz²| = params[4] h / (2 κ u*) for the parabolic K_z (Visser
    1997), inf for a constant K_z, u* = 0 (no curvature) or a column too shallow to step in."""
    if params[0] == KZ_CONSTANT or not (ustar > 0.0 and depth >= MIN_COLUMN_DEPTH):
        return math.inf
    return params[4] * depth / (2.0 * KAPPA * ustar)


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def substep_longest(depth, ustar, params, klev, kcols, row):
    """The longest vertical substep (s) in a particle's column: :func:`column_longest`, or for a
    K_z read from the file params[4] / :func:`profile_curvature` (inf for a straight profile or
    a column too shallow to step in)."""
    if params[0] != KZ_FILE:
        return column_longest(depth, ustar, params)
    if not depth >= MIN_COLUMN_DEPTH:
        return math.inf
    c = profile_curvature(depth, klev, kcols, row)
    if not c > 0.0:
        return math.inf
    return params[4] / c


def profile_curvatures(depth: np.ndarray, klev: np.ndarray, kz: np.ndarray) -> np.ndarray:
    """:func:`profile_curvature` of every column (s-1), shape (ny, nx): the worst of the frames
    of kz (nf nk or nk, ny, nx; m2 s-1 at the heights klev, (nk,)) in the shallowest of the
    column's depths (nf or 1, ny, nx; m) deeper than SHALLOW_COLUMN (0 where none is)."""
    nk = klev.size
    if nk < 3:
        return np.zeros(kz.shape[1:])
    k = kz.reshape(-1, nk, *kz.shape[1:])
    h = np.min(np.where(depth > SHALLOW_COLUMN, depth, np.inf), axis=0)
    lev = klev[None, :, None, None]
    slope = np.diff(k, axis=1) / (np.diff(lev, axis=1) * h)
    span = 0.5 * (lev[:, 2:] - lev[:, :-2]) * h
    return np.max(np.abs(np.diff(slope, axis=1)) / span, axis=(0, 1))


def check_substeps(
    dt: float,
    depth: np.ndarray,
    ustar: np.ndarray,
    params: np.ndarray,
    klev: np.ndarray | None = None,
    kz: np.ndarray | None = None,
) -> int:
    """The most vertical substeps a step of dt seconds takes in a column deeper than
    SHALLOW_COLUMN; InputError when that is more than the kernel allows (shallower columns, on
    drying banks, are held to MAX_SUBSTEPS and relax the criterion there). A K_z read from the
    file (mode 3) is given by its heights klev and frames kz (:func:`profile_curvatures`)."""
    from walkers.engine.kernels import MAX_SUBSTEPS

    deep = depth > SHALLOW_COLUMN
    if params[0] == KZ_CONSTANT or not deep.any():
        return 1
    if params[0] == KZ_FILE:
        assert klev is not None and kz is not None
        worst = float(np.max(profile_curvatures(depth, klev, kz)))
    else:
        worst = float(np.max(2.0 * KAPPA * ustar[deep] / depth[deep]))
    if worst <= 0.0:
        return 1
    longest = params[4] / worst
    n = 1 if not longest < dt else math.ceil(dt / longest)
    if n > MAX_SUBSTEPS:
        raise InputError(
            f"transport.dt = {dt:g} s would need {n} vertical substeps of {longest:.3g} s "
            f"(Visser's criterion with the K_z curvature of the worst column deeper than "
            f"{SHALLOW_COLUMN:g} m, substeps of at most {params[P_FRACTION]:g} / "
            f"max|d2K_z/dz2|); at most {MAX_SUBSTEPS} are allowed: shorten dt to at most "
            f"{MAX_SUBSTEPS * longest:.4g} s, or raise vertical.substep_fraction"
        )
    return n
