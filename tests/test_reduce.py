"""Reductions: the kernel estimate, receptors, budget and moments against closed forms."""

import numpy as np
import pytest
from scipy import stats

from walkers.engine.state import EXITED, IN_WATER, ParticleState
from walkers.run import reduce
from walkers.scenario.config import OutputGrid, Receptor
from walkers.verify import analytic


def gaussian_cloud(n, sigma, seed=0, mass=1.0):
    rng = np.random.default_rng(seed)
    st = ParticleState.from_arrays(
        rng.normal(0, sigma, n), rng.normal(0, sigma, n), np.full(n, mass / n), np.zeros(n)
    )
    st.status[:] = IN_WATER
    return st


def test_gaussian_kernel_estimate_has_the_variances_added():
    """Gaussian cloud (σ) smoothed with bandwidth b is Gaussian with σ² + b² (convolution of
    normals; Silverman 1986, from memory). Tolerance: 5 SE of the smoothed estimate at the peak."""
    n, sigma, b, h = 200000, 100.0, 60.0, 5.0
    st = gaussian_cloud(n, sigma)
    grid = OutputGrid(x0=-600.0, dx=10.0, nx=121, y0=-600.0, dy=10.0, ny=121, bandwidth=b)
    measure = reduce.cell_measure(grid, False, 2)
    conc, count = reduce.concentration(st, np.full(n, h), grid, measure)
    smooth = reduce.smoothed(conc, grid, (1.0, 1.0))
    s2 = sigma**2 + b**2 + 10.0**2 / 12  # box width adds its own variance dx²/12
    expected = analytic.gaussian_2d(
        0.0, 0.0, s2 / 2, x0=0, y0=0, u=0, v=0, kx=1.0, ky=1.0, mass=1.0, depth=h
    )
    # effective particles under a kernel of area 4π b²: n_eff ≈ n · 4π b² · pdf(0)
    n_eff = n * 4 * np.pi * b**2 / (2 * np.pi * (sigma**2 + b**2))
    assert smooth[60, 60] == pytest.approx(expected, rel=5 / np.sqrt(n_eff))
    assert count.sum() == n
    assert not smooth[60, 60] == pytest.approx(expected * 1.2, rel=5 / np.sqrt(n_eff))


def test_box_counting_conserves_mass_per_depth():
    st = gaussian_cloud(10000, 50.0, mass=3.0)
    grid = OutputGrid(x0=-500.0, dx=20.0, nx=51, y0=-500.0, dy=20.0, ny=51)
    conc, _ = reduce.concentration(
        st, np.full(10000, 2.0), grid, reduce.cell_measure(grid, False, 2)
    )
    assert conc.sum() * 20.0 * 20.0 * 2.0 == pytest.approx(3.0, rel=1e-12)


def test_receptor_circle_averages_over_its_area():
    st = gaussian_cloud(400000, 200.0)
    grid = OutputGrid(x0=-1000.0, dx=50.0, nx=41, y0=-1000.0, dy=50.0, ny=41)
    rec = [Receptor("c", 100.0, 0.0, radius=50.0)]
    depths = np.full(len(st), 4.0)
    value = reduce.receptor_values(st, depths, rec, None, grid, False, 2)[0]
    # mean of the Gaussian density over the disc, by scipy.integrate.dblquad
    from scipy import integrate

    pdf = lambda y, x: stats.norm.pdf(x, 0, 200) * stats.norm.pdf(y, 0, 200)  # noqa: E731
    mass, _ = integrate.dblquad(
        pdf,
        50.0,
        150.0,
        lambda x: -np.sqrt(max(50**2 - (x - 100) ** 2, 0)),
        lambda x: np.sqrt(max(50**2 - (x - 100) ** 2, 0)),
    )
    expected = mass / (np.pi * 50.0**2 * 4.0)
    n_in = 400000 * mass
    assert value == pytest.approx(expected, rel=5 / np.sqrt(n_in))


def test_mass_budget_books_each_particle_once():
    st = gaussian_cloud(10, 1.0)
    st.status[:3] = EXITED + 1
    st.mass[3:5] *= 0.5
    b = reduce.mass_budget(st)
    total = (
        b["budget_in_water"]
        + b["budget_outflow"].sum()
        + b["budget_decayed"]
        + b["budget_held_dry"]
    )
    assert total == pytest.approx(b["budget_released"], rel=1e-15)
    assert b["budget_outflow"][1] == pytest.approx(0.3)


def test_cloud_moments_match_sample_moments():
    st = gaussian_cloud(50000, 30.0, seed=4)
    m = reduce.cloud_moments(st, geographic=False)
    assert m["variance_x"] == pytest.approx(np.var(st.x), rel=1e-12)
    assert m["centroid_y"] == pytest.approx(np.mean(st.y), rel=1e-9, abs=1e-9)


def test_cloud_moments_weigh_by_mass_and_count_only_water():
    """Weighted centroid and (co)variances equal numpy's weighted average and covariance
    (``numpy.cov`` with ``aweights``, ``bias=True``) over the particles in water only."""
    st = gaussian_cloud(20000, 30.0, seed=5)
    rng = np.random.default_rng(6)
    st.mass[:] = rng.uniform(0.1, 2.0, len(st))
    st.y += 0.4 * (st.x - st.x.mean())  # a correlated cloud
    st.status[::7] = EXITED
    water = st.status == IN_WATER
    m = reduce.cloud_moments(st, geographic=False)
    w = st.mass[water]
    cov = np.cov(st.x[water], st.y[water], aweights=w, bias=True)
    assert m["centroid_x"] == pytest.approx(np.average(st.x[water], weights=w), rel=1e-12)
    assert m["centroid_y"] == pytest.approx(np.average(st.y[water], weights=w), rel=1e-12)
    expected = {"variance_x": cov[0, 0], "variance_y": cov[1, 1], "covariance_xy": cov[0, 1]}
    for key, value in expected.items():
        assert m[key] == pytest.approx(value, rel=1e-10)
    # twin: counting every particle, or ignoring the masses, gives another spread
    assert np.cov(st.x, st.y, aweights=st.mass, bias=True)[0, 1] != pytest.approx(
        m["covariance_xy"], rel=1e-3
    )
    assert np.var(st.y[water]) != pytest.approx(m["variance_y"], rel=1e-3)
