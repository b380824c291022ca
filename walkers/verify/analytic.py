"""Closed-form solutions used by ``walkers verify`` and the tests.

Each function names its source. "From memory" marks results recalled without the text at hand.
"""

from __future__ import annotations

import numpy as np
from scipy import stats


def gaussian_1d(x, t, *, x0: float, u: float, k: float, mass: float, area: float):
    """Concentration (kg m-3) of an instantaneous point release in a 1-D channel.

    C(x, t) = M / (A √(4πKt)) exp(−(x − x0 − ut)² / (4Kt)).
    Fischer, List, Koh, Imberger & Brooks 1979, Mixing in Inland and Coastal Waters, ch. 2
    (from memory).
    """
    s2 = 2.0 * k * t
    return mass / (area * np.sqrt(2.0 * np.pi * s2)) * np.exp(-((x - x0 - u * t) ** 2) / (2 * s2))


def gaussian_2d(x, y, t, *, x0, y0, u, v, kx, ky, mass, depth):
    """Depth-averaged concentration (kg m-3) of an instantaneous point release in uniform flow.

    C = M / (4πt h √(Kx Ky)) exp(−(x − x0 − ut)²/(4Kx t) − (y − y0 − vt)²/(4Ky t)).
    Fischer et al. 1979, ch. 2 (from memory).
    """
    sx2, sy2 = 2.0 * kx * t, 2.0 * ky * t
    norm = mass / (depth * 2.0 * np.pi * np.sqrt(sx2 * sy2))
    return norm * np.exp(-((x - x0 - u * t) ** 2) / (2 * sx2) - ((y - y0 - v * t) ** 2) / (2 * sy2))


def reflected_normal_cdf(x, *, x0: float, sigma: float, wall: float = 0.0):
    """CDF of Brownian motion started at x0 > wall with a reflecting wall, at spread sigma.

    Method of images: density φ(x; x0, σ) + φ(x; 2·wall − x0, σ) on x > wall. Carslaw & Jaeger
    1959, Conduction of Heat in Solids, §2.2 (from memory).
    """
    x = np.maximum(np.asarray(x, dtype=np.float64), wall)
    direct = stats.norm.cdf(x, x0, sigma) - stats.norm.cdf(wall, x0, sigma)
    image = stats.norm.cdf(x, 2 * wall - x0, sigma) - stats.norm.cdf(wall, 2 * wall - x0, sigma)
    return direct + image


def first_passage(distance: float, u: float, k: float):
    """Distribution of the time Brownian motion with drift u > 0 first reaches a level at
    ``distance`` downstream: the inverse Gaussian with mean d/u and shape d²/(2K).

    Cox & Miller 1965, The Theory of Stochastic Processes, §5.7 (from memory); in scipy's
    parameters invgauss(mu = mean/shape, scale = shape).
    """
    mean = distance / u
    shape = distance**2 / (2.0 * k)
    return stats.invgauss(mu=mean / shape, scale=shape)


def shear_variance(t, *, k: float, shear: float):
    """Streamwise variance (m2) of a point release in u = γ y with isotropic K:
    σx² = 2Kt (1 + γ² t² / 3). Standard shear-dispersion result (from memory; e.g. Okubo 1968)."""
    return 2.0 * k * t * (1.0 + shear**2 * t**2 / 3.0)


def decayed_mass(t, *, mass: float, rate: float):
    """Mass (kg) left after first-order decay: M0 exp(−k t)."""
    return mass * np.exp(-rate * np.asarray(t, dtype=np.float64))


def tidal_displacement(t, *, u0: float, amplitude: float, period: float):
    """Displacement (m) in u(t) = u0 + a cos(2πt/T): u0 t + a T/(2π) sin(2πt/T)."""
    w = 2.0 * np.pi / period
    return u0 * t + amplitude / w * np.sin(w * t)
