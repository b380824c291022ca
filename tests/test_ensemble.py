"""Ensembles for an uncertain source: draws, probabilities, receptor statistics, Dask execution.

Outside references used here:
- the Gaussian puff of a point release in uniform flow, C = M / (4 pi K t h) exp(-r^2 / (4 K t))
  (Fischer et al. 1979, Mixing in Inland and Coastal Waters, ch. 2 — from memory), averaged over
  an output cell with the normal CDF (scipy.stats.norm);
- the variances of independent normal displacements add, so the ensemble-mean concentration of a
  release whose position is normal with sd s0 is the same puff with variance 2 K t + s0^2 along
  each axis (common practice);
- binomial standard error sqrt(p (1 - p) / N) of a fraction of N independent members (common
  practice); laws of the draws checked with the Kolmogorov–Smirnov test (scipy.stats.kstest)
  against scipy.stats.lognorm, scipy.stats.uniform and scipy.stats.truncnorm;
- CF Conventions 1.8 through the CF checker with the tables in ../shared/cf-tables.

Statistical checks use fixed seeds, tolerances of 5 standard errors (derived beside each test)
and a twin that shows the check fails on a wrong answer. The places are invented.
"""

from __future__ import annotations

import math
import os
import signal
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from scipy import stats

import walkers
from walkers.ensemble import execute
from walkers.ensemble.assemble import members_for_convergence, summary_text, write_ensemble
from walkers.ensemble.batches import batches, percentiles_with_ci
from walkers.ensemble.draws import draw_source
from walkers.ensemble.execute import run_ensemble
from walkers.ensemble.members import threshold_crossing
from walkers.errors import InputError
from walkers.fields.analytic import analytic_flow
from walkers.scenario.config import Release
from walkers.scenario.specs import EnsembleSpec

sys.path.insert(0, str(Path(__file__).parent))
from test_io import cf_errors  # noqa: E402

U = 0.2  # m s-1 along x
K = 1.0  # m2 s-1, isotropic
DEPTH = 5.0  # m
MASS = 100.0  # kg
S0 = 100.0  # m, sd of the release position along x and along y
T_END = 3600.0  # s
CELL = 50.0  # m
PARTICLES = 500
MEMBERS = 64
THRESHOLD = 1.7e-4  # kg m-3 (0.17 mg/L): about half the members exceed it at the receptor
RECEPTOR_X = U * T_END  # the plume centre at the end


def scenario_dict(**ensemble_keys) -> dict:
    """A point release of uncertain position into uniform flow in an invented creek."""
    return {
        "run": {
            "start": "2026-06-01T08:00:00Z",
            "end": "2026-06-01T09:00:00Z",
            "time_step": "60 s",
            "output_interval": "30 min",
            "seed": 4242,
        },
        "flow": {
            "analytic": {
                "kind": "uniform",
                "u": f"{U} m/s",
                "depth": f"{DEPTH} m",
                "extent": ["-3 km", "5 km", "-3 km", "3 km"],
                "cells": [81, 61],
            }
        },
        "dispersion": {"coefficient": f"{K} m2/s"},
        "releases": [
            {"name": "spill", "x": 0, "y": 0, "mass": f"{MASS} kg", "particles": PARTICLES}
        ],
        "output": {
            "grid": {
                "x_origin": RECEPTOR_X - 12 * CELL,
                "y_origin": -12 * CELL,
                "cells_x": 25,
                "cells_y": 25,
                "cell_size": CELL,
            }
        },
        "receptors": [{"name": "oyster bed", "x": RECEPTOR_X, "y": 0.0, "thresholds": [THRESHOLD]}],
        "ensemble": {"members": MEMBERS, "location_sd": f"{S0} m", **ensemble_keys},
    }


@pytest.fixture(scope="module")
def analytic_result() -> xr.Dataset:
    return run_ensemble(scenario_dict())


# --------------------------------------------------------------------------------------------
# Draws
# --------------------------------------------------------------------------------------------


def _draws(spec: EnsembleSpec, n: int = 400, seed: int = 11):
    flow = analytic_flow("uniform", x_range=(-5000, 5000), y_range=(-5000, 5000), nx=11, ny=11)
    release = Release("point", np.array([[0.0, 0.0]]), 10, start=3600.0, mass=50.0)
    return [
        draw_source(spec, release, seed=seed, member=m, flow=flow, run_length=7200.0)
        for m in range(n)
    ]


def test_lognormal_mass_follows_its_law():
    # ln m is normal with mean ln(median) and sd ln(spread): scipy.stats.lognorm(s, scale=median)
    spec = EnsembleSpec(400, "r", 0, mass="lognormal", mass_median=200.0, mass_spread=2.0)
    mass = np.array([d.mass for d in _draws(spec)])
    assert stats.kstest(mass, stats.lognorm(math.log(2.0), scale=200.0).cdf).pvalue > 1e-3
    # twin: the wrong spread is rejected
    assert stats.kstest(mass, stats.lognorm(math.log(3.0), scale=200.0).cdf).pvalue < 1e-3


def test_uniform_circle_position_has_uniform_area_density():
    # uniform in a disc of radius R: (r / R)^2 is uniform on [0, 1] (common practice)
    spec = EnsembleSpec(400, "r", 0, location="uniform_circle", location_radius=300.0)
    r2 = np.array([(d.x**2 + d.y**2) / 300.0**2 for d in _draws(spec)])
    assert r2.max() <= 1.0
    assert stats.kstest(r2, stats.uniform().cdf).pvalue > 1e-3
    assert stats.kstest(np.sqrt(r2), stats.uniform().cdf).pvalue < 1e-3  # twin: r uniform


def test_normal_start_is_truncated_to_the_run():
    # sd 1 h about 1 h into a 2 h run: a normal truncated to [0, 2 h] (scipy.stats.truncnorm)
    spec = EnsembleSpec(400, "r", 0, start="normal", start_sd=3600.0)
    start = np.array([d.start for d in _draws(spec)])
    assert start.min() >= 0.0 and start.max() <= 7200.0
    law = stats.truncnorm(-1.0, 1.0, loc=3600.0, scale=3600.0)
    assert stats.kstest(start, law.cdf).pvalue > 1e-3
    assert stats.kstest(start, stats.norm(3600.0, 3600.0).cdf).pvalue < 1e-3  # twin: untruncated


def test_draws_depend_only_on_seed_and_member():
    spec = EnsembleSpec(
        5,
        "r",
        0,
        start="uniform",
        start_earliest=0.0,
        start_latest=3600.0,
        location="normal",
        location_sd=50.0,
        mass="triangular",
        mass_min=1.0,
        mass_mode=2.0,
        mass_max=5.0,
        duration_range=(0.0, 600.0),
        dispersion_multiplier_range=(0.5, 2.0),
    )
    a, b = _draws(spec, 5), _draws(spec, 5)
    assert a == b
    assert a != _draws(spec, 5, seed=12)
    assert len({d.mass for d in a}) == 5


def test_a_position_that_cannot_fall_in_water_is_an_input_error():
    flow = analytic_flow("uniform", x_range=(-100, 100), y_range=(-100, 100), nx=3, ny=3)
    spec = EnsembleSpec(1, "spill", 0, location="normal", location_sd=1e6)
    release = Release("point", np.array([[0.0, 0.0]]), 10, name="spill")
    with pytest.raises(InputError, match="location_sd.*spill"):
        draw_source(spec, release, seed=1, member=0, flow=flow, run_length=60.0)


# --------------------------------------------------------------------------------------------
# Reductions
# --------------------------------------------------------------------------------------------


def test_threshold_crossing_interpolates_linearly():
    t = np.array([0.0, 10.0, 20.0, 30.0])
    c = np.array([0.0, 2.0, 4.0, 0.0])
    first, above = threshold_crossing(t, c, 1.0)
    assert first == pytest.approx(5.0)  # 0 -> 2 crosses 1 halfway
    assert above == pytest.approx(5.0 + 10.0 + 7.5)  # 4 -> 0 crosses 1 at 3/4
    assert threshold_crossing(t, c, 5.0) == (math.inf, 0.0)


def test_percentiles_are_order_statistics_with_a_covering_interval():
    rng = np.random.default_rng(5)
    values = rng.normal(size=(200, 2))
    est, lo, hi = percentiles_with_ci(values, np.random.default_rng(1))
    # definition 1 of Hyndman & Fan 1996 is numpy's "inverted_cdf" (from memory)
    expected = np.percentile(values, [5, 50, 95], axis=0, method="inverted_cdf").T
    np.testing.assert_array_equal(est, expected)
    assert np.all(lo <= est) and np.all(est <= hi)
    never = np.full((10, 1), math.inf)
    assert np.all(np.isnan(percentiles_with_ci(never, np.random.default_rng(1))[0]))


def test_batches_cover_the_members_once_and_split_at_the_half():
    for n in (2, 3, 17, 64, 1001):
        for particles in (1, 1000, 10**6):
            ranges = batches(n, particles)
            covered = np.concatenate([np.arange(lo, hi) for lo, hi in ranges])
            np.testing.assert_array_equal(covered, np.arange(n))
            assert any(hi == n // 2 for _, hi in ranges)
            # at most 16 batches a half, unless a batch would exceed a million particles
            assert len(ranges) <= 32 or all(hi - lo == 1 for lo, hi in ranges)
            first = [hi - lo for lo, hi in ranges if hi <= n // 2] or [n]
            assert max(first) - min(first) <= 1  # nearly equal batches within a half


def test_batch_memory_does_not_grow_with_the_members():
    from walkers.ensemble.batches import MAX_BATCH_CELLS, MAX_BATCH_PARTICLES

    for n in (64, 10**4, 10**6):
        sizes = [hi - lo for lo, hi in batches(n, 1000, 250_000)]
        assert max(sizes) * 1000 <= MAX_BATCH_PARTICLES
        assert max(sizes) * 250_000 <= MAX_BATCH_CELLS
    # twin: without the cells bound (one cell) a million members make batches of 1000 members
    assert max(hi - lo for lo, hi in batches(10**6, 1000)) * 250_000 > MAX_BATCH_CELLS


# --------------------------------------------------------------------------------------------
# Analytic checks
# --------------------------------------------------------------------------------------------


def _cell_probability(centres: np.ndarray, mean: float, variance: float) -> np.ndarray:
    half = CELL / 2.0
    sd = math.sqrt(variance)
    return stats.norm.cdf((centres + half - mean) / sd) - stats.norm.cdf(
        (centres - half - mean) / sd
    )


def _mean_field_z(ds: xr.Dataset, variance: float) -> np.ndarray:
    """(observed - expected) / SE of the ensemble-mean concentration at the last output time.

    Expected: the cell average of the puff with the given variance per axis. SE: a member's cell
    count is Binomial(n, q(D)) given its displacement D, so Var(C_m) = w^2 (n E[q] - n E[q^2] +
    n^2 Var(q)) with w = M / (n A h) (law of total variance, common practice); E[q] is the cell
    probability under the compound normal; E[q^2] uses the cell midpoint, q ~ A g_a(x - D) with
    g_a the normal density of variance a = 2 K t, and per axis (L the cell size)
    E_D[(L g_a(x - D))^2] = L^2 g_{a/2 + s0^2}(x) / (2 sqrt(pi a)) (a product of normal
    densities). The mean of N members has SE = sqrt(Var(C_m) / N). Only cells expected to hold
    20 or more particles over all members are compared (the normal approximation of the mean).
    """
    x, y = ds["x"].values, ds["y"].values
    n, members = PARTICLES, ds.sizes["member"]
    w = MASS / (n * CELL * CELL * DEPTH)
    p = np.outer(_cell_probability(y, 0.0, variance), _cell_probability(x, U * T_END, variance))
    a = 2.0 * K * T_END

    def second_moment(c: np.ndarray, mean: float) -> np.ndarray:
        g = stats.norm.pdf(c, mean, math.sqrt(a / 2 + S0**2))
        return CELL**2 * g / (2 * math.sqrt(math.pi * a))

    q2 = np.outer(second_moment(y, 0.0), second_moment(x, U * T_END))
    var_member = w**2 * (n * p - n * q2 + n**2 * np.maximum(q2 - p**2, 0.0))
    se = np.sqrt(var_member / members)
    observed = ds["concentration_mean"].values[-1]
    keep = n * members * p >= 20
    return ((observed - w * n * p) / se)[keep]


def test_ensemble_mean_is_the_puff_with_the_position_variance_added(analytic_result):
    # Fischer et al. 1979 ch. 2 (from memory) with variances adding (common practice): 5 SE
    z = _mean_field_z(analytic_result, 2.0 * K * T_END + S0**2)
    assert z.size > 100
    assert np.max(np.abs(z)) < 5.0, np.max(np.abs(z))


def test_twin_ensemble_mean_is_not_the_puff_without_the_position_variance(analytic_result):
    z = _mean_field_z(analytic_result, 2.0 * K * T_END)
    assert np.max(np.abs(z)) > 5.0


def _analytic_peak(x_d: float, y_d: float, k: float = K) -> float:
    """Largest cell-averaged puff concentration (kg m-3) in the receptor cell over the output
    times, for a member released at (x_d, y_d) (Fischer et al. 1979, ch. 2 — from memory)."""
    best = 0.0
    for t in (1800.0, 3600.0):
        var = 2.0 * k * t
        px = _cell_probability(np.array([RECEPTOR_X]), x_d + U * t, var)[0]
        py = _cell_probability(np.array([0.0]), y_d, var)[0]
        best = max(best, MASS * px * py / (CELL * CELL * DEPTH))
    return best


def _exceedance_gap(
    ds: xr.Dataset, k: float = K, ignore_draws: bool = False
) -> tuple[float, float]:
    xs, ys = ds["source_x"].values, ds["source_y"].values
    if ignore_draws:
        xs, ys = np.zeros_like(xs), np.zeros_like(ys)
    analytic = np.mean([_analytic_peak(x, y, k) > THRESHOLD for x, y in zip(xs, ys, strict=True)])
    p = float(ds["receptor_exceedance_probability"].values[0, 0])
    se = math.sqrt(max(analytic * (1 - analytic), 0.25 / ds.sizes["member"]) / ds.sizes["member"])
    return abs(p - analytic), se


def test_receptor_exceedance_matches_the_analytic_peaks_of_the_drawn_sources(analytic_result):
    # binomial SE of a fraction of N members (common practice), floored at p(1-p) = 1/(4N): 5 SE
    gap, se = _exceedance_gap(analytic_result)
    assert gap < 5 * se, (gap, se)
    ds = analytic_result
    assert 0.2 < float(ds["receptor_exceedance_probability"][0, 0]) < 0.8
    # the receptor (radius 0) is its output cell: the window probability there is the same
    cell = ds["window_exceedance_probability"].sel(x=RECEPTOR_X, y=0.0, method="nearest")
    assert float(cell[0]) == float(ds["receptor_exceedance_probability"][0, 0])


def test_twin_exceedance_ignoring_the_drawn_positions_fails(analytic_result):
    gap, se = _exceedance_gap(analytic_result, ignore_draws=True)
    assert gap > 5 * se


def test_result_carries_probabilities_percentiles_member_table_and_convergence(analytic_result):
    ds = analytic_result
    assert ds["exceedance_probability"].attrs["units"] == "1"
    p = ds["exceedance_probability"].values
    assert p.min() >= 0.0 and p.max() <= 1.0
    assert np.all(ds["window_exceedance_probability"].values >= p.max(axis=1))
    assert ds.sizes["member"] == MEMBERS and ds["source_x"].std() > 0.5 * S0
    peak = ds["member_receptor_peak"].values[:, 0]
    median = float(ds["receptor_peak_percentile"].sel(percentile=50.0)[0])
    assert median == np.percentile(peak, 50, method="inverted_cdf")
    assert ds["receptor_peak_ci_lower"][0, 1] <= median <= ds["receptor_peak_ci_upper"][0, 1]
    arrived = np.isfinite(ds["member_arrival_time"].values[:, 0, 0])
    assert arrived.mean() == float(ds["receptor_exceedance_probability"][0, 0])
    # convergence: |P(N) - P(N/2)|, standard error sqrt(p (1 - p) / N) for k = N/2
    change = float(ds["convergence_change"][0])
    se_max = float(ds["convergence_standard_error"].attrs["largest_possible"])
    assert se_max == pytest.approx(math.sqrt(0.25 / MEMBERS))
    assert 0.0 <= change < 6 * se_max
    assert ds.attrs["caution"] == walkers.CAUTION
    # a depth-averaged ensemble has no water column: no bands, deposit or share on the bed
    assert "band" not in ds.dims and "member_on_bed_fraction" not in ds


def test_change_between_half_and_all_members_shrinks_as_one_over_sqrt_members():
    """For a binomial proportion, P(N) - P(N/2) has standard deviation sqrt(p (1 - p) / N), so
    E|P(N) - P(N/2)| = sqrt(2/pi) sqrt(p (1 - p) / N) (half-normal mean; binomial sampling
    error, common practice): the law behind members_for_convergence. Tolerance 5 standard errors
    of the mean over the repetitions; the twin (a 1/N law) fails it."""
    rng = np.random.default_rng(20261202)
    p, reps = 0.3, 4000
    for n in (100, 1600):
        hits = rng.random((reps, n)) < p
        change = np.abs(hits.mean(axis=1) - hits[:, : n // 2].mean(axis=1))
        expected = math.sqrt(2 / math.pi) * math.sqrt(p * (1 - p) / n)
        tolerance = 5 * change.std() / math.sqrt(reps)
        assert abs(change.mean() - expected) < tolerance
        wrong = math.sqrt(2 / math.pi) * math.sqrt(p * (1 - p)) / n * 10.0  # equal at n = 100
        if n == 1600:
            assert abs(change.mean() - wrong) > tolerance
    # N members bring a change c (seen with n members) within s: N = n (c / s)^2
    assert members_for_convergence(200, 0.208, 0.072) == math.ceil(200 * (0.208 / 0.072) ** 2)
    assert members_for_convergence(200, 0.05, 0.072) == 200


def test_summary_gives_a_convergence_verdict_and_says_what_a_dash_means(analytic_result):
    text = summary_text(analytic_result)
    change = float(analytic_result["convergence_change"][0])
    se = float(analytic_result["convergence_standard_error"][0])
    if change <= se:
        assert "settled, the change is within its standard error" in text
    else:
        more = members_for_convergence(MEMBERS, change, se)
        assert f"not settled; about {more} members would bring a change of this size" in text
    assert "A '-' in the arrival percentiles means" in text
    assert "e-0" not in text


def test_same_seed_gives_bitwise_the_same_ensemble_and_another_seed_does_not(analytic_result):
    xr.testing.assert_identical(run_ensemble(scenario_dict()), analytic_result)
    other = scenario_dict()
    other["run"]["seed"] = 4243
    assert not run_ensemble(other)["concentration_mean"].equals(
        analytic_result["concentration_mean"]
    )


def test_output_file_passes_the_cf_checker(analytic_result, tmp_path):
    path = write_ensemble(analytic_result, tmp_path / "ensemble.nc")
    errors, report = cf_errors(path)
    assert errors == 0, report
    back = xr.open_dataset(path)
    assert back["exceedance_probability"].attrs["units"] == "1"
    assert back["member"].attrs["standard_name"] == "realization"
    with pytest.raises(InputError, match="exists"):
        write_ensemble(analytic_result, path)


def test_figures_are_drawn(analytic_result, tmp_path):
    from walkers.ensemble.figures import plot_ensemble

    files = plot_ensemble(analytic_result, tmp_path)
    assert [f.name for f in files] == ["probability_thr0.png", "receptor_distributions.png"]
    assert all(f.stat().st_size > 10_000 for f in files)


def test_a_scenario_without_an_ensemble_table_is_an_input_error():
    data = scenario_dict()
    del data["ensemble"]
    with pytest.raises(InputError, match=r"\[ensemble\]"):
        run_ensemble(data)


# --------------------------------------------------------------------------------------------
# Dask: the same result on a local cluster and after a lost worker
# --------------------------------------------------------------------------------------------


def dask_scenario() -> dict:
    data = scenario_dict(mass_median="100 kg", mass_spread=1.5)
    data["releases"][0]["particles"] = 1500
    data["ensemble"]["members"] = 24
    return data


@pytest.fixture(scope="module")
def in_process() -> xr.Dataset:
    return run_ensemble(dask_scenario())


@pytest.fixture(scope="module")
def cluster():
    pytest.importorskip("dask.distributed")
    with execute._local_cluster(2) as local:
        yield local


def _run_with_timeout(**kwargs) -> xr.Dataset:
    with ThreadPoolExecutor(1) as pool:
        return pool.submit(run_ensemble, dask_scenario(), **kwargs).result(timeout=240)


def test_two_local_workers_give_bitwise_the_in_process_result(cluster, in_process):
    assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
    assert len(cluster.workers) == 2
    xr.testing.assert_identical(_run_with_timeout(scheduler=cluster.scheduler_address), in_process)


def test_a_worker_lost_mid_run_leaves_the_result_unchanged(cluster, in_process):
    from dask.distributed import Client

    with Client(cluster) as client:
        pids = client.run(os.getpid)
        killed: list[str] = []

        def kill_a_busy_worker(done: int, total: int) -> None:
            if killed:
                return
            busy = [a for a, keys in client.processing().items() if keys and a in pids]
            assert busy, "no worker was running a member when the first result came back"
            os.kill(pids[busy[0]], signal.SIGKILL)  # a worker process this test started
            killed.append(busy[0])

        result = _run_with_timeout(scheduler=cluster.scheduler_address, progress=kill_a_busy_worker)
        client.wait_for_workers(2, timeout=120)
        assert killed and pids[killed[0]] not in client.run(os.getpid).values()
    xr.testing.assert_identical(result, in_process)


def test_workers_and_scheduler_together_are_an_input_error():
    with pytest.raises(InputError, match="not both"):
        run_ensemble(dask_scenario(), workers=2, scheduler="tcp://127.0.0.1:1")
