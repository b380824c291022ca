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


def still_column(depth):
    """Inputs of a grid of 3 x 3 cells of 100 m at rest, depth in metres, every edge reflecting."""
    xc = np.array([0.0, 100.0, 200.0])
    flow = grid_flow(xc, xc, [0.0, 1e9], lambda X, Y, t: (0.0 * X, 0.0 * Y), depth=depth)
    tr = Transport(
        dt=10.0,
        dispersion=Dispersion(k1=0.0, k2=0.0),
        edges=dict.fromkeys(("west", "east", "south", "north"), "reflecting"),
    )
    return flow, mover.kernel_inputs(flow, flow.window(0.0, 1e9), tr)


def run_column(n, sigma, settling, depth, ustar, mode, kz, wd, dt, nsteps, drift=1.0, seed=3):
    """Particles at heights sigma (fractions of the depth) in the middle cell, stepped."""
    flow, inputs = still_column(depth)
    inputs = mover.with_column(inputs, flow.depth.data, ustar, mode, kz, wd)
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
    longest = vertical.longest_substep(np.full((1, 1, 1), H), USTAR, vertical.KZ_PARABOLIC)
    assert longest == pytest.approx(0.01 * H / (2 * vertical.KAPPA * USTAR), rel=1e-12)
    assert vertical.check_substeps(dt, longest) == 9
    n = 20_000
    st = run_column(n, uniform_heights(n), 0.0, H, USTAR, 2, 0.0, 0.0, dt, 250, drift=drift)
    p = chi_square_uniform(st.sigma)
    if drift:
        assert p > FIVE_SIGMA, p
    else:
        assert p < FIVE_SIGMA, p  # the twin that fails: the naive walk
        ends = np.mean((st.sigma < 0.05) | (st.sigma > 0.95))
        assert ends > 0.1 + 5 * math.sqrt(0.1 * 0.9 / n)


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
    measured, 3.4 % of the mass below 0.01 h instead of 4.9 %, converging as the substep shrinks:
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
