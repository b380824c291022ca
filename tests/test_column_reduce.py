"""The water-column reductions (walkers.run.column_reduce): depth bands, the deposit, profiles at
receptors, the vertical section, against exact expectations and scipy.stats, with their twins.

External references:
- box counting and its sampling error: a band holding n of N particles is a binomial count, so
  its standard error is m √(N p (1 - p)) / (A b) (common practice; any statistics text);
- Pearson's χ² goodness-of-fit test of layer counts (scipy.stats.chisquare) against the layer
  probabilities of a truncated exponential law of heights (scipy.stats.truncexpon).

Tolerances: 5 standard errors, or a χ² p-value above 1e-4 (a false alarm 1 time in 10 000).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from walkers.engine.state import IN_WATER, ON_BED, ParticleState
from walkers.errors import InputError
from walkers.run import column_reduce as column
from walkers.run import column_reduce_twin as column_twin
from walkers.run import reduce
from walkers.scenario.column_output import ColumnOutput, DepthBand, SectionLine
from walkers.scenario.config import OutputGrid, Receptor

GRID = OutputGrid(x0=5.0, dx=10.0, nx=4, y0=5.0, dy=10.0, ny=3)
AREA = 100.0  # m2, one output cell
BANDS = (
    DepthBand("surface", "surface", 0.0, 1.0),
    DepthBand("bottom", "bed", 0.0, 1.0),
    DepthBand("middle", "bed", 2.0, 4.0),
    DepthBand("whole_column", "column"),
)


def _column_particles(n, depth, sigma, rng, cell=(1, 2), mass=1.0):
    """n particles of mass ``mass`` spread uniformly over output cell (j, i), at heights sigma."""
    j, i = cell
    x = GRID.x0 + (i + rng.uniform(-0.5, 0.5, n)) * GRID.dx
    y = GRID.y0 + (j + rng.uniform(-0.5, 0.5, n)) * GRID.dy
    p = ParticleState.from_arrays(x, y, np.full(n, mass), np.zeros(n)).in_column(sigma)
    p.status[:] = IN_WATER
    return p, np.full(n, float(depth))


def _bands(p, depths, bands=BANDS):
    measure = reduce.cell_measure(GRID, False, 2)
    return column.band_concentration(
        p.x, p.y, p.sigma, depths, p.mass, p.status, bands, GRID, measure
    )


def _within(estimate, expected, se, k=5.0):
    return abs(estimate - expected) <= k * se


# --------------------------------------------------------------------------------------------
# depth bands
# --------------------------------------------------------------------------------------------


def test_uniform_column_gives_mass_over_area_times_depth_in_every_band():
    # a well-mixed column: every band holds C = M / (A h); binomial SE (common practice)
    rng = np.random.default_rng(11)
    n, h = 20_000, 8.0
    p, depths = _column_particles(n, h, rng.uniform(0, 1, n), rng)
    conc, count = _bands(p, depths)
    expected = n / (AREA * h)
    for b, band in enumerate(BANDS):
        thickness = h if band.reference == "column" else band.end - band.start
        prob = thickness / h
        se = math.sqrt(n * prob * (1 - prob)) / (AREA * thickness) if prob < 1 else 0.0
        assert _within(conc[b, 1, 2], expected, se), band.name
        assert count[b, 1, 2] == int(conc[b, 1, 2] * AREA * thickness + 0.5)
    assert conc[:, 0, :].sum() == 0.0


def test_twin_unclipped_band_thickness_fails_in_a_shallow_column():
    # can fail: in a column 0.6 m deep the surface band 0-1 m is 0.6 m thick; dividing by the
    # nominal 1 m gives 0.6 C, outside 5 SE of C = M / (A h)
    rng = np.random.default_rng(12)
    n, h = 20_000, 0.6
    p, depths = _column_particles(n, h, rng.uniform(0, 1, n), rng)
    conc, _ = _bands(p, depths)
    expected = n / (AREA * h)
    assert conc[0, 1, 2] == pytest.approx(expected)  # every particle is in the band
    assert conc[2, 1, 2] == 0.0  # the band 2-4 m above the bed is not in this column
    unclipped = n / (AREA * 1.0)
    se = math.sqrt(n * 0.5 * 0.5) / (AREA * h)  # generous: the largest binomial SE
    assert not _within(unclipped, expected, se)


def test_bottom_band_of_an_exponential_profile_against_scipy():
    # heights above the bed z ~ truncated exponential of scale l on [0, h] (scipy.stats.truncexpon):
    # the bottom 1 m holds P = F(1 m) of the mass, C = M P / (A 1 m); binomial SE
    rng = np.random.default_rng(13)
    n, h, scale = 20_000, 6.0, 1.5
    law = stats.truncexpon(b=h / scale, scale=scale)
    z = law.rvs(size=n, random_state=rng)
    p, depths = _column_particles(n, h, z / h, rng)
    conc, _ = _bands(p, depths)
    for b, (lo, hi) in ((1, (0.0, 1.0)), (2, (2.0, 4.0))):
        prob = law.cdf(hi) - law.cdf(lo)
        se = math.sqrt(n * prob * (1 - prob)) / (AREA * (hi - lo))
        assert _within(conc[b, 1, 2], n * prob / (AREA * (hi - lo)), se)
    # twin: the well-mixed expectation is far off for the bottom band
    well_mixed = n / (AREA * h)
    prob = law.cdf(1.0)
    assert not _within(conc[1, 1, 2], well_mixed, math.sqrt(n * prob * (1 - prob)) / AREA)


def test_whole_column_band_is_bitwise_the_depth_averaged_concentration():
    rng = np.random.default_rng(14)
    n = 5_000
    x = rng.uniform(-5, 45, n)
    y = rng.uniform(-5, 35, n)
    p = ParticleState.from_arrays(x, y, rng.uniform(0.5, 2, n), np.zeros(n))
    p.in_column(rng.uniform(0, 1, n))
    p.status[:] = rng.choice([IN_WATER, ON_BED, 2], size=n, p=[0.8, 0.1, 0.1])
    depths = rng.uniform(0.5, 9.0, n)
    measure = reduce.cell_measure(GRID, False, 2)
    conc, count = reduce.concentration(p, depths, GRID, measure)
    bands, bcount = _bands(p, depths)
    assert np.array_equal(bands[3], conc)
    assert np.array_equal(bcount[3], count)


# --------------------------------------------------------------------------------------------
# the deposit
# --------------------------------------------------------------------------------------------


def test_deposit_per_bed_area_sums_to_the_mass_on_the_bed():
    rng = np.random.default_rng(15)
    n = 4_000
    p = ParticleState.from_arrays(
        rng.uniform(0, 40, n), rng.uniform(0, 30, n), rng.uniform(0.1, 3, n), np.zeros(n)
    ).in_column(0.0)
    p.status[:] = np.where(rng.uniform(size=n) < 0.4, ON_BED, IN_WATER)
    measure = reduce.cell_measure(GRID, False, 2)
    dep, count = column.deposit(p.x, p.y, p.mass, p.status, GRID, measure)
    on_bed = reduce.mass_budget(p)["budget_on_bed"]
    assert (dep * measure).sum() == pytest.approx(on_bed, rel=1e-13)
    assert count.sum() == np.count_nonzero(p.status == ON_BED)
    # twin: the mass in water is not on the bed
    all_mass = p.mass.sum()
    assert (dep * measure).sum() != pytest.approx(all_mass, rel=1e-3)


# --------------------------------------------------------------------------------------------
# profiles at receptors
# --------------------------------------------------------------------------------------------


def _profile_case(seed, levels=8, n=12_000, h=5.0, scale=1.2):
    rng = np.random.default_rng(seed)
    law = stats.truncexpon(b=h / scale, scale=scale)
    radius = 4.0
    r = radius * np.sqrt(rng.uniform(0, 1, n))
    a = rng.uniform(0, 2 * np.pi, n)
    inside_x, inside_y = 20.0 + r * np.cos(a), 15.0 + r * np.sin(a)
    # as many again outside the circle (they must not count)
    out_x, out_y = 20.0 + rng.uniform(5, 15, n), 15.0 + rng.uniform(-10, 10, n)
    x, y = np.concatenate([inside_x, out_x]), np.concatenate([inside_y, out_y])
    z = np.concatenate([law.rvs(size=n, random_state=rng), rng.uniform(0, h, n)])
    p = ParticleState.from_arrays(x, y, np.ones(2 * n), np.zeros(2 * n)).in_column(z / h)
    p.status[:] = IN_WATER
    depths = np.full(2 * n, h)
    receptors = [Receptor("buoy", 20.0, 15.0, radius), Receptor("cell", 25.0, 15.0, 0.0)]
    measure = reduce.cell_measure(GRID, False, 2)
    places, area = column.receptor_places(receptors, GRID, measure, False)
    prof = column.receptor_profiles(
        p.x, p.y, p.sigma, depths, p.mass, p.status, places, area, levels
    )
    return p, depths, receptors, measure, prof, law, n, h, radius


def test_receptor_profile_follows_the_height_law_chi_square():
    # Pearson's χ² of the layer counts at the receptor against truncexpon layer probabilities
    levels = 8
    p, depths, receptors, measure, prof, law, n, h, radius = _profile_case(21, levels)
    area = math.pi * radius**2
    counts = prof[0] * area * h / levels  # unit masses: the count in each layer
    assert counts.sum() == pytest.approx(n, rel=1e-12)
    edges = np.linspace(0, h, levels + 1)
    expected = n * np.diff(law.cdf(edges))
    assert stats.chisquare(counts, expected).pvalue > 1e-4
    # twin: against a law of twice the scale the same test fails
    wrong = stats.truncexpon(b=h / (2 * law.kwds["scale"]), scale=2 * law.kwds["scale"])
    assert stats.chisquare(counts, n * np.diff(wrong.cdf(edges))).pvalue < 1e-4


def test_receptor_profile_averages_to_the_depth_averaged_receptor_value():
    p, depths, receptors, measure, prof, *_ = _profile_case(22)
    conc, _ = reduce.concentration(p, depths, GRID, measure)
    flat = reduce.receptor_values(p, depths, receptors, conc, GRID, False, 2)
    assert prof.mean(axis=1) == pytest.approx(flat, rel=1e-12)


# --------------------------------------------------------------------------------------------
# the vertical section
# --------------------------------------------------------------------------------------------


def test_section_of_a_uniform_slab_gives_its_concentration():
    # particles uniform in a slab 0..60 m x -10..10 m x depth h: C = M / (60 * 20 * h) everywhere
    # on a section along y = 0 of width 8 m; binomial SE per bin
    rng = np.random.default_rng(31)
    n, h, levels = 60_000, 4.0, 4
    x, y = rng.uniform(0, 60, n), rng.uniform(-10, 10, n)
    p = ParticleState.from_arrays(x, y, np.ones(n), np.zeros(n)).in_column(rng.uniform(0, 1, n))
    p.status[:] = IN_WATER
    depths = np.full(n, h)
    line = SectionLine("axis", np.array([[5.0, 0.0], [30.0, 0.0], [55.0, 0.0]]), 8.0, 10.0)
    geometry = column.section_geometry(line, False)
    conc, mean_depth = column.section_concentration(
        p.x, p.y, p.sigma, depths, p.mass, p.status, geometry, line, levels
    )
    assert conc.shape == (5, levels)
    assert geometry["distance"] == pytest.approx([5, 15, 25, 35, 45])
    expected = n / (60 * 20 * h)
    prob = (10 * 8 * h / levels) / (60 * 20 * h)
    se = math.sqrt(n * prob * (1 - prob)) / (10 * 8 * h / levels)
    assert np.all(np.abs(conc - expected) <= 5 * se)
    assert mean_depth == pytest.approx(np.full(5, h))
    # twin: a width taken as twice what it is halves the estimate, outside 5 SE
    assert np.all(np.abs(conc / 2 - expected) > 5 * se)


def test_section_bins_follow_a_bent_line_and_end_at_its_ends():
    # an L-shaped line: a point beside the second leg is counted at its distance along the line;
    # a point beyond either end is not counted
    line = SectionLine("bend", np.array([[0.0, 0.0], [20.0, 0.0], [20.0, 20.0]]), 4.0, 5.0)
    geometry = column.section_geometry(line, False)
    x = np.array([21.0, 10.0, -1.0, 20.5])
    y = np.array([12.0, 1.0, 0.0, 21.0])
    p = ParticleState.from_arrays(x, y, np.ones(4), np.zeros(4)).in_column(0.5)
    p.status[:] = IN_WATER
    conc, _ = column.section_concentration(
        p.x, p.y, p.sigma, np.full(4, 2.0), p.mass, p.status, geometry, line, 1
    )
    counted = conc[:, 0] * geometry["length"] * line.width * 2.0
    assert counted == pytest.approx([0, 0, 1, 0, 0, 0, 1, 0])  # at 10 m and at 32 m along


# --------------------------------------------------------------------------------------------
# compiled reductions equal their numpy twins
# --------------------------------------------------------------------------------------------


def _random_particles(seed, n=3_000):
    rng = np.random.default_rng(seed)
    p = ParticleState.from_arrays(
        rng.uniform(-10, 50, n), rng.uniform(-10, 40, n), rng.uniform(0.1, 2, n), np.zeros(n)
    ).in_column(rng.choice([0.0, 1.0, 0.5], size=n, p=[0.05, 0.05, 0.9]) * rng.uniform(0, 1, n))
    p.status[:] = rng.choice([IN_WATER, ON_BED, 0, 2, 4], size=n)
    return p, rng.uniform(0.2, 8.0, n)


def test_compiled_reductions_equal_their_numpy_twins():
    p, depths = _random_particles(41)
    args = (p.x, p.y, p.sigma, depths, p.mass, p.status)
    grid = column._grid_tuple(GRID)
    table = column.band_table(BANDS)
    outs = []
    for impl in (column, column_twin):
        bands = np.zeros((len(BANDS), GRID.ny, GRID.nx))
        bcount = np.zeros_like(bands, dtype=np.int64)
        impl.band_mass(*args, *table, grid, bands, bcount)
        bed = np.zeros((GRID.ny, GRID.nx))
        bedn = np.zeros_like(bed, dtype=np.int64)
        impl.bed_mass(p.x, p.y, p.mass, p.status, grid, bed, bedn)
        receptors = [Receptor("a", 20.0, 15.0, 6.0), Receptor("b", 35.0, 25.0), Receptor("c", 99.0)]
        places, _ = column.receptor_places(receptors, GRID, np.full((3, 4), AREA), False)
        prof = np.zeros((3, 7))
        impl.profile_mass(*args, places, 7, prof)
        line = SectionLine("s", np.array([[0.0, 0.0], [30.0, 10.0], [30.0, 30.0]]), 6.0, 7.0)
        geometry = column.section_geometry(line, False)
        sec = np.zeros((len(geometry["distance"]), 5))
        hsum, nsec = np.zeros(sec.shape[0]), np.zeros(sec.shape[0], dtype=np.int64)
        impl.section_mass(*args, geometry["line"], 3.0, 7.0, 5, sec, hsum, nsec)
        outs.append((bands, bcount, bed, bedn, prof, sec, hsum, nsec))
    for a, b in zip(*outs, strict=True):
        assert np.array_equal(a, b)
    assert outs[0][0].sum() > 0 and outs[0][2].sum() > 0 and outs[0][4].sum() > 0
    assert outs[0][5].sum() > 0


def test_twin_check_catches_a_changed_band():
    # can fail: the same comparison finds a band 1 m deeper
    p, depths = _random_particles(42)
    args = (p.x, p.y, p.sigma, depths, p.mass, p.status)
    grid = column._grid_tuple(GRID)
    ref, start, end = column.band_table(BANDS)
    a = np.zeros((len(BANDS), GRID.ny, GRID.nx))
    b = np.zeros_like(a)
    column.band_mass(*args, ref, start, end, grid, a, np.zeros_like(a, dtype=np.int64))
    column_twin.band_mass(
        *args, ref, start + 1.0, end + 1.0, grid, b, np.zeros_like(a, dtype=np.int64)
    )
    assert not np.array_equal(a, b)


# --------------------------------------------------------------------------------------------
# settings
# --------------------------------------------------------------------------------------------


def test_band_and_section_settings_are_checked_at_the_door():
    with pytest.raises(InputError, match="start"):
        DepthBand("bad", "surface", 2.0, 1.0)
    with pytest.raises(InputError, match="reference"):
        DepthBand("bad", "middle", 0.0, 1.0)  # type: ignore[arg-type]
    with pytest.raises(InputError, match="names must differ"):
        ColumnOutput(bands=(DepthBand("a"), DepthBand("a")))
    with pytest.raises(InputError, match="two or more"):
        SectionLine("s", np.array([[0.0, 0.0]]), 1.0, 1.0)
    with pytest.raises(InputError, match="same"):
        column.section_geometry(SectionLine("s", np.zeros((2, 2)), 1.0, 1.0), False)
