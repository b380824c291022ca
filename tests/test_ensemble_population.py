"""Ensemble members moved as one particle population (walkers.run.population) against the
member-by-member path (each member its own run of walkers.run.simulate.simulate).

Outside references used here:
- binomial standard error sqrt(p (1 - p) / N) of a fraction of N members, and the variances of
  two estimates adding for their difference (common practice); the two paths share the members'
  drawn sources, so their exceedance counts are positively correlated and the sum of variances
  bounds the variance of the difference from above;
- the mass budget released = in water + out through the edges + decayed + held dry (the
  conservation of mass, common practice), to float64 round-off.

Statistical checks use fixed seeds, tolerances of 5 standard errors and a twin that shows they
fail on a wrong answer. The places are invented.
"""

from __future__ import annotations

import dataclasses

import numba
import numpy as np
import pytest

from walkers.engine.randomness import run_streams
from walkers.ensemble.members import (
    _prepare,
    _recipe_of,
    _reduce_batch,
    member_draw,
    member_releases,
)
from walkers.run.population import make_population, simulate_population
from walkers.run.simulate import simulate

U = 0.2  # m s-1 along x
K = 1.0  # m2 s-1
DEPTH = 5.0  # m
CELL = 50.0  # m
MEMBERS = 40
PARTICLES = 400
THRESHOLD = 1.0e-3  # kg m-3: exceeded near the centre of the narrow plumes only
BUDGET = ("budget_released", "budget_in_water", "budget_decayed", "budget_held_dry")


def scenario(multiplier: tuple[float, float] | None = (0.05, 0.3), members: int = MEMBERS) -> dict:
    """A point release of uncertain place and spread into uniform flow in an invented creek."""
    ensemble: dict = {
        "members": members,
        "location_sd": "20 m",
        "mass_median": "100 kg",
        "mass_spread": 1.5,
    }
    if multiplier is not None:
        ensemble["dispersion_multiplier_min"] = multiplier[0]
        ensemble["dispersion_multiplier_max"] = multiplier[1]
    return {
        "run": {
            "start": "2026-06-01T08:00:00Z",
            "end": "2026-06-01T09:00:00Z",
            "time_step": "60 s",
            "output_interval": "20 min",
            "seed": 515,
        },
        "flow": {
            "analytic": {
                "kind": "uniform",
                "u": f"{U} m/s",
                "depth": f"{DEPTH} m",
                "extent": ["-2 km", "3 km", "-2 km", "2 km"],
                "cells": [51, 41],
            }
        },
        "dispersion": {"coefficient": f"{K} m2/s"},
        "decay": {"half_life": "3 h"},
        "releases": [{"name": "spill", "x": 0, "y": 0, "mass": "100 kg", "particles": PARTICLES}],
        "output": {
            "grid": {
                "x_origin": -200.0,
                "y_origin": -400.0,
                "cells_x": 24,
                "cells_y": 17,
                "cell_size": CELL,
            }
        },
        "receptors": [{"name": "reed bed", "x": 720.0, "y": 0.0, "thresholds": [THRESHOLD]}],
        "ensemble": ensemble,
    }


def _member_run(prepared, member: int):
    """Member ``member`` run on its own, as the ensemble ran members before populations (with
    the scenario's water-column outputs in three dimensions)."""
    sc = prepared.scenario
    draw = member_draw(prepared, member)
    d = prepared.transport.dispersion
    transport = dataclasses.replace(
        prepared.transport,
        dispersion=dataclasses.replace(d, multiplier=d.multiplier * draw.dispersion_multiplier),
    )
    return simulate(
        prepared.flow,
        transport,
        member_releases(prepared, draw),
        start=prepared.offset,
        end=prepared.offset + sc.duration,
        output_interval=sc.output_interval,
        output_grid=sc.output,
        receptors=sc.receptors,
        seed=sc.seed,
        member=member,
        time_step_check="substep" if sc.substep else "fail",
        column_output=sc.column_output,
    )


def _population_outputs(prepared, members, walk_key):
    """Per-member concentration (m, t, y, x), receptor series (m, r, t) and budgets (m, t)."""
    sc = prepared.scenario
    draws = [member_draw(prepared, m) for m in members]
    population = make_population(
        [member_releases(prepared, d) for d in draws],
        [d.dispersion_multiplier for d in draws],
        members,
        sc.seed,
        prepared.flow,
    )
    nt = int(round(sc.duration / sc.output_interval)) + 1
    conc = np.zeros((len(members), nt, sc.output.ny, sc.output.nx))
    series = np.zeros((len(members), len(sc.receptors), nt))
    budget = {k: np.zeros((len(members), nt)) for k in BUDGET}

    def keep(k, b, c, values, mass):
        conc[b, k], series[b, :, k] = c, values
        for name in BUDGET:
            budget[name][b, k] = mass[name]

    simulate_population(
        prepared.flow,
        prepared.transport,
        population,
        keep,
        start=prepared.offset,
        end=prepared.offset + sc.duration,
        output_interval=sc.output_interval,
        output_grid=sc.output,
        receptors=sc.receptors,
        walk_key=walk_key,
    )
    return conc, series, budget


@pytest.fixture(scope="module")
def prepared():
    return _prepare(_recipe_of(scenario(), None))


@pytest.fixture(scope="module")
def member_by_member(prepared):
    """Exceedance counts (t, y, x) of the members run one by one."""
    counts = None
    for m in range(MEMBERS):
        above = _member_run(prepared, m)["concentration"].values > THRESHOLD
        counts = above.astype(np.int32) if counts is None else counts + above
    return counts


# --------------------------------------------------------------------------------------------
# A population of one member is the member's own run; budgets per member
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("member", [0, 7])
def test_a_population_of_one_member_with_its_walk_key_is_bitwise_its_own_run(prepared, member):
    own = _member_run(prepared, member)
    conc, series, budget = _population_outputs(
        prepared, [member], run_streams(prepared.scenario.seed, member)[0]
    )
    np.testing.assert_array_equal(conc[0], own["concentration"].values)
    np.testing.assert_array_equal(series[0], own["receptor_concentration"].values)
    for name in BUDGET:
        np.testing.assert_array_equal(budget[name][0], own[name].values)
    # twin: another member's walk key moves the same particles differently
    other, _, _ = _population_outputs(
        prepared, [member], run_streams(prepared.scenario.seed, member + 1)[0]
    )
    assert not np.array_equal(other[0], own["concentration"].values)


def test_each_member_of_a_population_keeps_its_own_mass_budget(prepared):
    members = [3, 4, 5, 6]
    _, _, budget = _population_outputs(prepared, members, 12345)
    for b, m in enumerate(members):
        own = _member_run(prepared, m)
        # what a member releases, and when, is its own: bitwise its run's
        np.testing.assert_array_equal(budget["budget_released"][b], own["budget_released"].values)
        # twin: the neighbour's release is another one (drawn mass differs)
        neighbour = budget["budget_released"][(b + 1) % len(members)]
        assert not np.array_equal(neighbour, own["budget_released"].values)
    # conservation of mass per member, to round-off (no open edge is reached in this creek)
    held = budget["budget_in_water"] + budget["budget_decayed"] + budget["budget_held_dry"]
    released = budget["budget_released"]
    assert np.all(released[:, -1] > 0)
    np.testing.assert_allclose(held, released, rtol=1e-12, atol=0.0)
    # twin: the budget of the whole population is not any member's
    assert not np.allclose(held.sum(axis=0), released[0], rtol=1e-12)


# --------------------------------------------------------------------------------------------
# The population path against the member-by-member path, statistically
# --------------------------------------------------------------------------------------------


def _largest_z(counts_a: np.ndarray, counts_b: np.ndarray, n: int) -> float:
    """Largest |p_a - p_b| / SE over cells and times, SE = sqrt((p_a q_a + p_b q_b) / n) with
    each p q floored at 1/(4 n) (a fraction of n members, common practice)."""
    pa, pb = counts_a / n, counts_b / n
    floor = 1.0 / (4.0 * n)
    se = np.sqrt((np.maximum(pa * (1 - pa), floor) + np.maximum(pb * (1 - pb), floor)) / n)
    return float(np.max(np.abs(pa - pb) / se))


def test_population_probabilities_match_member_by_member_within_sampling_error(
    prepared, member_by_member
):
    pop = _reduce_batch(prepared, 0, MEMBERS, (THRESHOLD,))
    assert member_by_member.max() >= MEMBERS // 4  # the threshold is exceeded somewhere
    assert _largest_z(pop.exceed[0], member_by_member, MEMBERS) < 5.0
    # twin: the same members with no drawn dispersion multiplier spread too far to exceed
    plain = _prepare(_recipe_of(scenario(multiplier=None), None))
    wrong = _reduce_batch(plain, 0, MEMBERS, (THRESHOLD,))
    assert _largest_z(wrong.exceed[0], member_by_member, MEMBERS) > 5.0


# --------------------------------------------------------------------------------------------
# Bitwise the same for 1 and 2 threads; the numpy twin; memory
# --------------------------------------------------------------------------------------------


def _arrays(result) -> dict[str, np.ndarray]:
    names = ("exceed", "window", "conc_sum", "peak", "arrival", "above")
    return {n: getattr(result, n) for n in names}


def test_a_batch_is_bitwise_the_same_on_one_and_two_threads(prepared):
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = _arrays(_reduce_batch(prepared, 0, 12, (THRESHOLD,)))
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        two = _arrays(_reduce_batch(prepared, 0, 12, (THRESHOLD,)))
    finally:
        numba.set_num_threads(before)
    for name in one:
        np.testing.assert_array_equal(one[name], two[name], err_msg=name)
    # twin: the batch that starts at member 1 draws another walk
    shifted = _arrays(_reduce_batch(prepared, 1, 13, (THRESHOLD,)))
    assert not np.array_equal(shifted["conc_sum"], one["conc_sum"])


def test_the_numpy_twin_moves_a_population_as_the_kernels_do():
    """Twin and kernels equal to 1e-12 with per-particle multipliers on the estuary demo's
    drift (gridded, flow-aligned K over drying flats)."""
    import tomllib
    from pathlib import Path

    path = Path(__file__).resolve().parents[1] / "scenarios" / "saltmarsh_ensemble.toml"
    data = tomllib.loads(path.read_text())
    data["run"]["end"] = "2026-05-04T06:00:00Z"
    data["releases"][0]["particles"] = 100  # 3 members: 300 > kernels.BLOCK, blocks on threads
    data["ensemble"].update(
        members=4,
        start_latest="2026-05-04T03:00:00Z",
        dispersion_multiplier_min=0.5,
        dispersion_multiplier_max=2.0,
    )
    demo = _prepare(_recipe_of(data, path.parent))
    thr = (1e-6,)
    fast = _arrays(_reduce_batch(demo, 0, 3, thr))
    twin = _arrays(_reduce_batch(demo, 0, 3, thr, stepper="reference"))
    assert fast["conc_sum"].max() > 0
    for name in fast:
        np.testing.assert_allclose(twin[name], fast[name], rtol=1e-12, atol=0.0, err_msg=name)


def test_batch_reductions_are_sized_by_outputs_and_members_not_particles():
    small = _prepare(_recipe_of(scenario(), None))
    a = _arrays(_reduce_batch(small, 0, 4, (THRESHOLD,)))
    data = scenario()
    data["releases"][0]["particles"] = 4 * PARTICLES
    large = _prepare(_recipe_of(data, None))
    b = _arrays(_reduce_batch(large, 0, 4, (THRESHOLD,)))
    c = _arrays(_reduce_batch(large, 0, 8, (THRESHOLD,)))
    sc = small.scenario
    fields = (int(round(sc.duration / sc.output_interval)) + 1, sc.output.ny, sc.output.nx)
    assert a["exceed"].shape == c["exceed"].shape == (1, *fields)
    assert a["conc_sum"].shape == c["conc_sum"].shape == fields
    for name in a:
        assert a[name].nbytes == b[name].nbytes, name  # 4 x the particles: the same sizes
    assert c["peak"].shape == (8, 1) and c["arrival"].shape == (8, 1, 1)
    # twin: the particles themselves do grow with the particles per member
    pops = [
        make_population(
            [member_releases(p, member_draw(p, 0))], [1.0], [0], p.scenario.seed, p.flow
        )
        for p in (small, large)
    ]
    assert pops[1].particles.nbytes == 4 * pops[0].particles.nbytes
