"""Each verification case passes at a fixed seed, and a deliberately wrong run fails it.

Sources are named in ``walkers.verify`` beside every check: Fischer et al. 1979 (Gaussian
solution), Carslaw & Jaeger 1959 (method of images), Cox & Miller 1965 (inverse Gaussian first
passage), Hunter, Craig & Phillips 1993 and Visser 1997 (well-mixed condition), the shear-dispersion
variance 2Kt(1 + γ²t²/3), first-order decay, the RK4 stability function, and on curvilinear grids
the line vortex (Batchelor 1967) and the cases above in index space. Tolerances are five
standard errors or the 5-sigma critical values of the distribution tests (see walkers/verify.py).
"""

import pytest

from walkers.verify.cases import run_case

SEED = 20261201

CASES = [
    # (case, particles, wrong run that must fail, check that must catch it). The tolerances follow
    # the particle count (walkers/verify/cases.py). The well-mixed cases run 10000 particles: at
    # SEED their wrong runs (drift removed) still miss by 12.8 and 13.0 standard errors (depth,
    # curvilinear) and by a chi-square p-value that rounds to 0 (K(x)).
    ("point-1d", 20000, {"dispersion_factor": 1.15}, "variance x"),
    ("point-2d", 20000, {"dispersion_factor": 1.15}, "variance x"),
    ("reflecting-wall", 10000, {"wall": "absorbing"}, "KS distance to images law"),
    ("absorbing-edge", 10000, {"velocity_factor": 1.1}, "fraction gone"),
    ("well-mixed-k", 10000, {"drift": False}, "chi-square"),
    ("well-mixed-depth", 10000, {"drift": False}, "largest |C − 1|"),
    ("shear", 20000, {"shear_factor": 0.0}, "variance x"),
    ("decay-budget", 2000, {"decay_factor": 1.01}, "mass in water"),
    ("tidal", 10, {"frame_interval": 7200.0}, "displacement"),
    ("rotation", 1, {"scheme": "euler"}, "RK4 radius"),
    ("curvilinear-vortex", 40, {"speed_factor": 1.01}, "angle travelled"),
    ("curvilinear-channel", 20000, {"dispersion_factor": 1.15}, "variance x"),
    ("curvilinear-wall", 10000, {"wall": "absent"}, "KS distance to images law"),
    ("curvilinear-well-mixed", 10000, {"drift": False}, "largest |C − 1|"),
    ("mesh-point", 20000, {"dispersion_factor": 1.15}, "variance x"),
    ("mesh-well-mixed", 40000, {"drift": False}, "KS p-value"),
]


@pytest.mark.parametrize("name,particles,wrong,catcher", CASES, ids=[c[0] for c in CASES])
def test_case_passes(name, particles, wrong, catcher):
    result = run_case(name, particles=particles, seed=SEED)
    failed = [c for c in result.checks if not c.passed]
    assert not failed, [(c.name, c.measured, c.expected, c.tolerance) for c in failed]


@pytest.mark.parametrize("name,particles,wrong,catcher", CASES, ids=[c[0] for c in CASES])
def test_wrong_run_fails_the_case(name, particles, wrong, catcher):
    result = run_case(name, particles=particles, seed=SEED, **wrong)
    caught = [c for c in result.checks if catcher in c.name and not c.passed]
    assert caught, f"{name}: the wrong run {wrong} was not caught by '{catcher}'"


def test_concentration_error_falls_like_inverse_square_root_of_n():
    result = run_case("point-1d", particles=40000, seed=SEED)
    slope = next(c for c in result.checks if "slope" in c.name)
    # Expected -0.5; the spread of three noisy errors makes ±0.25 about 5 standard errors
    # (each error has ~6 % relative spread over ~100 cells; see walkers.verify).
    assert slope.passed, slope.measured
