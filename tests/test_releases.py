"""Release shapes and timings against their defining distributions (scipy.stats as reference)."""

import numpy as np
import pytest
from scipy import stats

from walkers.engine.releases import make_particles, points_in_polygon, release_times_and_masses
from walkers.errors import InputError
from walkers.scenario.config import Release

P5 = 5.7e-7  # two-sided 5-sigma level


def ks_ok(sample, cdf):
    return stats.kstest(sample, cdf).pvalue > P5


def test_circle_release_is_uniform_in_the_disc():
    """Uniform in a disc: (r/R)² ~ U(0, 1) and the angle ~ U(0, 2π) (common practice)."""
    rel = Release("circle", np.array([[100.0, -50.0]]), 20000, radius=40.0)
    st, _ = make_particles([rel], np.random.default_rng(1))
    r2 = ((st.x - 100.0) ** 2 + (st.y + 50.0) ** 2) / 40.0**2
    angle = np.arctan2(st.y + 50.0, st.x - 100.0) % (2 * np.pi)
    assert ks_ok(r2, stats.uniform.cdf)
    assert ks_ok(angle / (2 * np.pi), stats.uniform.cdf)
    # twin: radii drawn uniformly (not by sqrt) crowd the centre and fail the same test
    rng = np.random.default_rng(1)
    assert not ks_ok((rng.random(20000)) ** 2, stats.uniform.cdf)


def test_polygon_release_fills_the_polygon_evenly():
    ring = np.array([[0.0, 0.0], [100.0, 0.0], [100.0, 50.0], [50.0, 100.0], [0.0, 50.0]])
    rel = Release("polygon", ring, 20000)
    st, _ = make_particles([rel], np.random.default_rng(2))
    assert points_in_polygon(st.x, st.y, ring).all()
    # The square part (y < 50) holds 5000 of the 7500 m² area: binomial test at 5 SE.
    frac = np.mean(st.y < 50.0)
    assert abs(frac - 5000 / 7500) < 5 * np.sqrt((2 / 3) * (1 / 3) / 20000)


def test_line_release_is_stratified_along_the_line():
    rel = Release("line", np.array([[0.0, 0.0], [300.0, 400.0]]), 1000)
    st, _ = make_particles([rel], np.random.default_rng(3))
    s = np.hypot(st.x, st.y) / 500.0
    counts = np.histogram(s, bins=10, range=(0, 1))[0]
    assert np.all(counts == 100)  # one particle in each of 1000 equal strata
    np.testing.assert_allclose(st.y / st.x, 4 / 3)


def test_continuous_release_mass_is_rate_times_duration_with_even_times():
    rel = Release(
        "point", np.array([[0.0, 0.0]]), 600, start=100.0, duration=3600.0, mass=0.5 * 3600.0
    )
    t, m = release_times_and_masses(rel)
    assert m.sum() == pytest.approx(0.5 * 3600.0, rel=1e-12)
    np.testing.assert_allclose(np.diff(t), 6.0)
    assert t[0] == pytest.approx(103.0) and t[-1] == pytest.approx(3697.0)


def test_time_series_rate_puts_particles_where_the_rate_is_high():
    """A rate rising linearly from 0: release times follow the CDF (t/T)² of a triangle."""
    rel = Release(
        "point",
        np.array([[0.0, 0.0]]),
        4000,
        duration=1000.0,
        rate_times=np.array([0.0, 1000.0]),
        rates=np.array([0.0, 2.0]),
    )
    t, m = release_times_and_masses(rel)
    assert m.sum() == pytest.approx(1000.0, rel=1e-9)  # ∫ 2 t/T dt = 1000 kg
    assert stats.kstest(t / 1000.0, lambda q: q**2).statistic < 1.0 / 4000 + 1e-3
    assert stats.kstest(t / 1000.0, stats.uniform.cdf).statistic > 0.2  # twin: not uniform


def test_bad_release_definitions_are_refused():
    with pytest.raises(InputError, match="radius"):
        Release("circle", np.array([[0.0, 0.0]]), 10)
    with pytest.raises(InputError, match="mass must be > 0"):
        Release("point", np.array([[0.0, 0.0]]), 10, mass=-1.0)
    with pytest.raises(InputError, match="polygon needs three"):
        make_particles(
            [Release("polygon", np.array([[0.0, 0.0], [1.0, 1.0]]), 5)], np.random.default_rng(0)
        )
