"""Settling velocity of a small grain from its size, for a release's grain_sizes: Stokes' law.

Stokes, G.G. 1851, "On the effect of the internal friction of fluids on the motion of pendulums",
Trans. Camb. Phil. Soc. 9, 8-106: the buoyant weight (rho_s - rho) g π d³ / 6 of a sphere of
diameter d balances the drag 3 π μ d w_s, so

    w_s = (rho_s - rho) g d² / (18 μ),

valid while the grain Reynolds number rho w_s d / μ is below about 1 (silt and clay; common
practice). Larger grains are given as settling velocities.
"""

from __future__ import annotations

from walkers.errors import InputError
from walkers.scenario.config import SEA_WATER_DENSITY

#: Standard acceleration of gravity (m s-2), CGPM 1901.
GRAVITY = 9.80665
#: Dynamic viscosity μ of sea water (Pa s) at about 15 °C and salinity 35 (common practice; fresh
#: water at 20 °C: 1.0e-3).
SEA_WATER_VISCOSITY = 1.2e-3
#: Largest grain Reynolds number rho w_s d / μ for which Stokes' law is taken (common practice).
STOKES_REYNOLDS_LIMIT = 1.0


def stokes_settling_velocity(
    diameter: float,
    grain_density: float,
    where: str = "grain size",
    water_density: float = SEA_WATER_DENSITY,
    viscosity: float = SEA_WATER_VISCOSITY,
) -> float:
    """Settling velocity w_s (m s-1) of a grain of ``diameter`` d (m) and ``grain_density``
    rho_s (kg m-3) in water of ``water_density`` rho (kg m-3) and dynamic ``viscosity`` μ (Pa s):
    Stokes' law w_s = (rho_s - rho) g d² / (18 μ) (Stokes 1851). InputError naming ``where`` when
    the grain is not heavier than the water or too large for Stokes' regime (grain Reynolds
    number rho w_s d / μ above STOKES_REYNOLDS_LIMIT)."""
    if not grain_density > water_density:
        raise InputError(
            f"{where}: grains of density {grain_density:g} kg/m3 do not sink in water of "
            f"{water_density:g} kg/m3; give grain_density above it, or behaviour = 'rising'"
        )
    w = (grain_density - water_density) * GRAVITY * diameter**2 / (18.0 * viscosity)
    reynolds = w * diameter * water_density / viscosity
    if reynolds > STOKES_REYNOLDS_LIMIT:
        largest = (
            18.0
            * viscosity**2
            * STOKES_REYNOLDS_LIMIT
            / ((grain_density - water_density) * GRAVITY * water_density)
        ) ** (1.0 / 3.0)
        raise InputError(
            f"{where} = {diameter * 1e6:.4g} um: Stokes' law holds for grains up to about "
            f"{largest * 1e6:.0f} um (grain Reynolds number {reynolds:.3g} > "
            f"{STOKES_REYNOLDS_LIMIT:g}); give larger grains as settling_velocities instead"
        )
    return float(w)
