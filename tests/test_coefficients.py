"""Dispersion coefficients from depth, speed and roughness: handbook formulas and hand values.

Sources:
- Elder, J.W. 1959, "The dispersion of marked fluid in turbulent shear flow", J. Fluid Mech. 5:
  K_L = 5.93 h u*, from Taylor's shear-dispersion integral over the logarithmic velocity profile
  with von Karman constant 0.41, plus the depth-mean turbulent diffusivity kappa h u* / 6 (the
  derivation as recalled from memory; the value 5.93 is the published one).
- Fischer, List, Koh, Imberger & Brooks 1979, Mixing in Inland and Coastal Waters, ch. 5:
  K_T = 0.15 h u* (straight channels), 0.6 h u* (meandering channels, estuaries).
- Manning's equation in SI form, U = h^(2/3) S^(1/2) / n, with u* = sqrt(g h S) (common practice).
"""

import math

import numpy as np
import pytest
from scipy import integrate, special

from walkers.engine.coefficients import (
    ELDER_COEFFICIENT,
    GRAVITY,
    TRANSVERSE_MEANDERING,
    TRANSVERSE_STRAIGHT,
    estimate_dispersion,
    shear_velocity,
)
from walkers.errors import InputError


def test_manning_shear_velocity_hand_value():
    # h = 5 m, |U| = 0.5 m/s, n = 0.025 s m^-1/3:
    # sqrt(9.80665) = 3.1315571, 5^(1/6) = 1.3076605, u* = 0.025 * 0.5 * 3.1315571 / 1.3076605.
    u_star = shear_velocity(5.0, 0.5, manning_n=0.025)
    assert float(u_star) == pytest.approx(0.0299347303, rel=1e-8)


def test_manning_shear_velocity_agrees_with_manning_slope():
    # From U = h^(2/3) S^(1/2) / n the slope is S = (n U)^2 / h^(4/3); u* = sqrt(g h S).
    h, speed, n = 3.2, 0.8, 0.03
    slope = (n * speed) ** 2 / h ** (4.0 / 3.0)
    assert float(shear_velocity(h, speed, manning_n=n)) == pytest.approx(
        math.sqrt(GRAVITY * h * slope), rel=1e-12
    )


def test_drag_shear_velocity_hand_value():
    # C_d = 0.0025, |U| = 1.2 m/s: u* = 0.05 * 1.2 = 0.06 m/s (tau = rho C_d U^2 = rho u*^2).
    assert float(shear_velocity(10.0, -1.2, drag_coefficient=0.0025)) == pytest.approx(0.06)


def test_elder_and_fischer_hand_values_with_manning():
    # u* = 0.0299347303 m/s (above); K_L = 5.93 * 5 * u* (Elder 1959);
    # K_T = 0.6 * 5 * u* (Fischer et al. 1979, ch. 5, meandering / estuary).
    k_l, k_t = estimate_dispersion(5.0, 0.5, manning_n=0.025)
    assert float(k_l) == pytest.approx(0.887564754, rel=1e-8)
    assert float(k_t) == pytest.approx(0.0898041910, rel=1e-8)


def test_elder_and_fischer_hand_values_with_drag_coefficient_straight_channel():
    # u* = 0.06 m/s, h = 10 m: K_L = 5.93 * 10 * 0.06 = 3.558 m2/s;
    # straight channel K_T = 0.15 * 10 * 0.06 = 0.09 m2/s (Fischer et al. 1979, ch. 5).
    k_l, k_t = estimate_dispersion(
        10.0, 1.2, drag_coefficient=0.0025, transverse_factor=TRANSVERSE_STRAIGHT
    )
    assert float(k_l) == pytest.approx(3.558, rel=1e-12)
    assert float(k_t) == pytest.approx(0.09, rel=1e-12)


def test_elder_coefficient_follows_from_taylor_analysis_of_log_profile():
    # Elder 1959 (derivation from memory): with zeta = z/h, the log-profile deviation
    # u' = (u*/kappa)(1 + ln zeta) and eddy diffusivity kappa u* h zeta (1 - zeta), Taylor's
    # integral gives K = -(h u*/kappa^3) I with I = int_0^1 (1 + ln z) int_0^z ln s/(1-s) ds dz.
    # scipy.special.spence(z) = int_1^z ln t/(1-t) dt, so the inner integral is
    # spence(z) - spence(0). Adding the mean vertical diffusivity kappa h u* / 6:
    # K / (h u*) = -I / kappa^3 + kappa / 6 = 5.93 for kappa = 0.41.
    def outer(z):
        return (1.0 + math.log(z)) * (special.spence(z) - special.spence(0.0))

    integral, err = integrate.quad(outer, 0.0, 1.0)
    assert err < 1e-8
    kappa = 0.41
    assert -integral / kappa**3 + kappa / 6 == pytest.approx(ELDER_COEFFICIENT, abs=0.005)


def test_fischer_transverse_factors():
    assert TRANSVERSE_STRAIGHT == 0.15
    assert TRANSVERSE_MEANDERING == 0.6
    k_l, k_t = estimate_dispersion(4.0, 0.7, manning_n=0.02)
    assert float(k_t / k_l) == pytest.approx(0.6 / 5.93)


def test_gridded_fields_broadcast_and_dry_cells_are_zero():
    depth = np.array([[0.0, 2.0, 8.0], [-1.0, 4.0, 16.0]])
    speed = np.array([[0.4, 0.4, 0.4], [0.4, 0.2, 0.1]])
    k_l, k_t = estimate_dispersion(depth, speed, manning_n=0.025)
    assert k_l.shape == depth.shape and k_t.shape == depth.shape
    assert k_l[0, 0] == 0.0 and k_l[1, 0] == 0.0
    assert np.all(np.isfinite(k_l)) and np.all(np.isfinite(k_t))
    h, s = depth[1, 2], speed[1, 2]
    expected = 5.93 * h * 0.025 * s * math.sqrt(GRAVITY) / h ** (1 / 6)
    assert k_l[1, 2] == pytest.approx(expected, rel=1e-12)
    # u* scales with |U|: the same depth at twice the speed doubles both coefficients.
    k2, _ = estimate_dispersion(4.0, 0.4, manning_n=0.025)
    assert float(k2) == pytest.approx(2 * k_l[1, 1])


@pytest.mark.parametrize(
    "kwargs",
    [
        {},
        {"manning_n": 0.02, "drag_coefficient": 0.002},
        {"manning_n": -0.02},
        {"drag_coefficient": 0.0},
        {"manning_n": 0.02, "transverse_factor": 0.0},
    ],
)
def test_roughness_must_be_one_and_positive(kwargs):
    with pytest.raises(InputError, match="dispersion"):
        estimate_dispersion(5.0, 0.5, **kwargs)
