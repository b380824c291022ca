"""Dispersion coefficients estimated from depth, velocity and bed roughness (published formulas).

Longitudinal dispersion, Elder (1959):

    K_L = 5.93 h u*

Elder, J.W. 1959, "The dispersion of marked fluid in turbulent shear flow", J. Fluid Mech. 5,
544-560: Taylor's shear-dispersion analysis applied to the logarithmic velocity profile of a wide
open channel (von Karman constant 0.41), plus the turbulent diffusion along the flow.

Transverse mixing, Fischer, List, Koh, Imberger & Brooks 1979, Mixing in Inland and Coastal Waters,
Academic Press, ch. 5:

    K_T = 0.15 h u*   straight, uniform (laboratory-like) channels;
    K_T = 0.6 h u*    natural, meandering channels and estuaries (range about 0.3-1.0).

Shear velocity u* from the depth-averaged speed |U| and the water depth h (wide channel, hydraulic
radius ~ h; common practice):

    Manning:           u* = n |U| sqrt(g) / h^(1/6)     (n in s m^-1/3)
    drag coefficient:  u* = sqrt(C_d) |U|               (bed stress tau = rho C_d |U|^2)

The Manning form follows from U = (1/n) h^(2/3) S^(1/2) and u* = sqrt(g h S) (Manning's equation,
SI form; common practice).
"""

from __future__ import annotations

import numpy as np

from walkers.errors import InputError

#: Standard acceleration of gravity (m s-2), CGPM 1901.
GRAVITY = 9.80665
#: Elder (1959) longitudinal coefficient K_L / (h u*).
ELDER_COEFFICIENT = 5.93
#: Fischer et al. (1979) ch. 5, K_T / (h u*) for straight uniform channels.
TRANSVERSE_STRAIGHT = 0.15
#: Fischer et al. (1979) ch. 5, K_T / (h u*) for meandering channels and estuaries.
TRANSVERSE_MEANDERING = 0.6


def shear_velocity(
    depth: np.ndarray | float,
    speed: np.ndarray | float,
    *,
    manning_n: float | None = None,
    drag_coefficient: float | None = None,
) -> np.ndarray:
    """Bed shear velocity u* (m s-1) from depth h (m) and depth-averaged speed |U| (m s-1).

    Give exactly one roughness: ``manning_n`` (s m^-1/3), u* = n |U| sqrt(g) / h^(1/6), or
    ``drag_coefficient`` (dimensionless), u* = sqrt(C_d) |U|. Where h <= 0 (dry) u* is 0.
    """
    h = np.asarray(depth, dtype=np.float64)
    s = np.abs(np.asarray(speed, dtype=np.float64))
    if drag_coefficient is not None and manning_n is None:
        if not (np.isfinite(drag_coefficient) and drag_coefficient > 0):
            raise InputError(f"dispersion.drag_coefficient = {drag_coefficient!r}: must be > 0")
        return np.where(h > 0, np.sqrt(drag_coefficient) * s, 0.0)
    if manning_n is not None and drag_coefficient is None:
        if not (np.isfinite(manning_n) and manning_n > 0):
            raise InputError(f"dispersion.manning_n = {manning_n!r}: must be > 0 (s m^-1/3)")
        wet = h > 0
        root = np.where(wet, h, 1.0) ** (1.0 / 6.0)
        return np.where(wet, manning_n * s * np.sqrt(GRAVITY) / root, 0.0)
    raise InputError("dispersion: give exactly one of manning_n or drag_coefficient")


def estimate_dispersion(
    depth: np.ndarray | float,
    speed: np.ndarray | float,
    *,
    manning_n: float | None = None,
    drag_coefficient: float | None = None,
    transverse_factor: float = TRANSVERSE_MEANDERING,
) -> tuple[np.ndarray, np.ndarray]:
    """Longitudinal and transverse dispersion coefficients (m2 s-1) from depth and speed.

    K_L = 5.93 h u* (Elder, J.W. 1959, "The dispersion of marked fluid in turbulent shear flow",
    J. Fluid Mech. 5); K_T = transverse_factor * h u* with 0.15 for straight uniform channels and
    0.6 for meandering channels and estuaries (Fischer, List, Koh, Imberger & Brooks 1979, Mixing
    in Inland and Coastal Waters, ch. 5). u* from :func:`shear_velocity`.

    Parameters
    ----------
    depth : water depth h (m), any shape; dry cells (h <= 0) get 0.
    speed : depth-averaged speed |U| (m s-1), broadcastable with ``depth``.
    manning_n, drag_coefficient : exactly one bed roughness (s m^-1/3, or dimensionless).
    transverse_factor : K_T / (h u*).

    Returns
    -------
    (K_L, K_T) : float64 arrays of the broadcast shape (m2 s-1).
    """
    if not (np.isfinite(transverse_factor) and transverse_factor > 0):
        raise InputError(
            f"dispersion transverse factor {transverse_factor!r}: must be > 0 "
            f"(0.15 straight channel, 0.6 meandering channel or estuary)"
        )
    h = np.asarray(depth, dtype=np.float64)
    u_star = shear_velocity(h, speed, manning_n=manning_n, drag_coefficient=drag_coefficient)
    hu = np.where(h > 0, h, 0.0) * u_star
    return ELDER_COEFFICIENT * hu, transverse_factor * hu
