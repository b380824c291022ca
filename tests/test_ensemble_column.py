"""Ensembles of three-dimensional runs: water-column outputs over the uncertain source
(walkers.ensemble.water_column) against each member's own single run.

Outside references used here:
- an exceedance probability over N members is the fraction of members above the threshold (the
  Monte Carlo estimate of a probability, common practice): here checked exactly, member by
  member, against the members' own single runs (each reduced by the single run's own path,
  walkers.run.simulate and its accumulator);
- the mass budget's share on the bed is on-the-bed over released (conservation of mass, common
  practice);
- CF Conventions 1.8 (Eaton et al. 2020) through the CF checker with the tables in
  ../shared/cf-tables.

Each check has a twin that shows it fails on a wrong reduction. The runs are small (200 particles
a member, six members, 2 h) and use the settling release and the parabolic K_z over a depositing
bed that tests/test_vertical_runs.py compiles already. The places are invented.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from walkers.ensemble import execute
from walkers.ensemble.assemble import summary_text, write_ensemble
from walkers.ensemble.execute import run_ensemble
from walkers.ensemble.members import _prepare, _recipe_of
from walkers.errors import InputError
from walkers.scenario.load import load_scenario

sys.path.insert(0, str(Path(__file__).parent))
from test_ensemble_population import _member_run  # noqa: E402
from test_io import cf_errors  # noqa: E402
from test_vertical_runs import PARABOLIC, SETTLING, scenario  # noqa: E402

MEMBERS = 6
THRESHOLDS = (0.5e-3, 2e-3)  # kg m-3 (0.5 and 2 mg/L)
DEPOSIT_THRESHOLDS = (1e-3, 5e-3)  # kg m-2 (1 and 5 g/m2)
SURFACE, WHOLE = 0, 2  # the default bands: surface, bottom, whole_column


def scenario_3d(deposit_thresholds=("1 g/m2", "5 g/m2")) -> dict:
    """Six members of the settling release of test_vertical_runs (1000 kg 1 m above the bed,
    half at 0.1 mm/s, half at 1 mm/s) with uncertain place and mass, on a 250 m output grid."""
    t = scenario(vertical=PARABOLIC, release=SETTLING, u=0.3)
    t["releases"][0]["particles"] = 200
    t["run"]["end"] = "2026-01-01T02:00:00Z"
    t["output"]["grid"] = {
        "west": 9000.0,
        "east": 13000.0,
        "south": 8500.0,
        "north": 11500.0,
        "cell_size": 250.0,
    }
    t["receptors"] = [
        {"name": "weir", "x": 12000.0, "y": 10000.0, "thresholds": ["0.5 mg/L", "2 mg/L"]}
    ]
    t["ensemble"] = {
        "members": MEMBERS,
        "location_sd": "300 m",
        "mass_median": "1000 kg",
        "mass_spread": 2.0,
        "deposit_thresholds": list(deposit_thresholds),
    }
    return t


@pytest.fixture(scope="module")
def by_one() -> xr.Dataset:
    """The ensemble with every member in a batch of its own: each member then walks with its
    own stream, as its single run does (see walkers.run.population)."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(execute, "batches", lambda n, *_: [(m, m + 1) for m in range(n)])
        return run_ensemble(scenario_3d())


@pytest.fixture(scope="module")
def own_runs() -> list[xr.Dataset]:
    """Each member's own single run (walkers.run.simulate, the single run's reductions)."""
    prepared = _prepare(_recipe_of(scenario_3d(), None))
    return [_member_run(prepared, m) for m in range(MEMBERS)]


def test_band_exceedance_is_the_share_of_members_whose_own_run_exceeds_in_that_band(
    by_one, own_runs
):
    p = by_one["band_exceedance_probability"].values  # (threshold, time, band, y, x)
    assert list(by_one["threshold"].values) == list(THRESHOLDS)
    bands = np.stack([r["concentration_in_band"].values for r in own_runs])  # (m, t, band, y, x)
    share = np.stack([(bands > level).mean(axis=0) for level in THRESHOLDS])
    np.testing.assert_array_equal(p, share)
    assert p[0, -1, SURFACE].max() > 0.0 and p[1, -1].max() > 0.0  # exceeded somewhere
    # twin: a wrong reduction (the whole column read as the surface band) fails the same check
    wrong = share.copy()
    wrong[:, :, SURFACE] = share[:, :, WHOLE]
    assert not np.array_equal(p, wrong)


def test_deposit_exceedance_is_the_share_of_members_whose_own_deposit_exceeds(by_one, own_runs):
    deposits = np.stack([r["deposit"].values for r in own_runs])  # (m, t, y, x) kg m-2
    assert list(by_one["deposit_threshold"].values) == list(DEPOSIT_THRESHOLDS)
    p = by_one["deposit_exceedance_probability"].values
    share = np.stack([(deposits > level).mean(axis=0) for level in DEPOSIT_THRESHOLDS])
    np.testing.assert_array_equal(p, share)
    assert p[0, -1].max() > 0.0 and p[1, -1].max() > 0.0  # exceeded somewhere
    total = np.zeros_like(deposits[0])
    for d in deposits:  # member order, as the batches add them
        total += d
    np.testing.assert_allclose(by_one["deposit_mean"].values, total / MEMBERS, rtol=1e-12)
    # twin: the exceedance of the mean deposit (a wrong reduction) is not the probability
    mean_above = np.stack([(total / MEMBERS > level) for level in DEPOSIT_THRESHOLDS])
    assert not np.array_equal(p, mean_above.astype(float))


def test_each_members_share_on_the_bed_is_its_own_run_budget(by_one, own_runs):
    seen = by_one["member_on_bed_fraction"].values  # (member, time)
    own = np.stack([(r.budget_on_bed / r.budget_released).values for r in own_runs])
    np.testing.assert_array_equal(seen, own)
    assert np.all(seen[:, -1] > 0.0)
    # twin: the members' rows shifted by one are another member's budgets
    assert not np.array_equal(np.roll(seen, 1, axis=0), own)
    # the summary gives the percentiles of the share at the end (order statistics of the members)
    text = summary_text(by_one)
    ordered = np.sort(seen[:, -1])
    assert float(by_one["on_bed_fraction_percentile"].sel(percentile=50.0)) == ordered[2]
    assert "On the bed at the end of the run" in text
    assert "Band surface at the end" in text and "Deposit on the bed at the end" in text


def test_water_column_outputs_pass_the_cf_checker_and_are_drawn(by_one, tmp_path):
    from walkers.ensemble.figures import plot_ensemble

    path = write_ensemble(by_one, tmp_path / "ensemble.nc")
    errors, report = cf_errors(path)
    assert errors == 0, report
    with xr.open_dataset(path) as back:
        assert back["band_exceedance_probability"].attrs["units"] == "1"
        assert back["deposit_mean"].attrs["units"] == "kg m-2"
        assert back["deposit_threshold"].attrs["units"] == "kg m-2"
        assert back["member_on_bed_fraction"].attrs["long_name"]
    names = [f.name for f in plot_ensemble(by_one, tmp_path)]
    assert "band_probability_0_thr0.png" in names and "band_probability_2_thr1.png" in names
    assert "deposit_probability_thr1.png" in names


def test_water_column_sums_of_a_batch_do_not_grow_with_its_members():
    from walkers.ensemble.members import _reduce_batch

    prepared = _prepare(_recipe_of(scenario_3d(), None))
    two, four = (_reduce_batch(prepared, 0, n, THRESHOLDS).column for n in (2, 4))
    assert two is not None and four is not None
    for name in ("band_exceed", "deposit_exceed", "deposit_sum"):
        assert getattr(two, name).nbytes == getattr(four, name).nbytes, name
    # only the per-member table grows, by one row of output times a member
    assert four.on_bed[0].shape == (4, two.on_bed[0].shape[1])
    # twin: the counts themselves do grow with the members counted
    assert 0 < two.band_exceed.sum() < four.band_exceed.sum()


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"deposit_thresholds": ["1 g/m3"]}, r"ensemble\.deposit_thresholds\[0\].*mass per bed"),
        ({"deposit_thresholds": ["-1 g/m2"]}, r"ensemble\.deposit_thresholds"),
        ({"bed": "reflecting"}, r"ensemble\.deposit_thresholds: its bed does not deposit"),
    ],
)
def test_a_bad_deposit_threshold_is_an_input_error_naming_the_key(change, message):
    t = scenario_3d()
    if "bed" in change:
        t["vertical"] = {k: v for k, v in PARABOLIC.items() if k != "deposition_velocity"}
        t["vertical"]["bed"] = change["bed"]
    else:
        t["ensemble"].update(change)
    with pytest.raises(InputError, match=message):
        load_scenario(t)


def test_three_dimensional_sums_are_bitwise_the_same_on_two_local_workers():
    pytest.importorskip("dask.distributed")
    t = scenario_3d()
    one = run_ensemble(t)
    two = run_ensemble(t, workers=2)
    xr.testing.assert_identical(one, two)
    assert two["band_exceedance_probability"].values.max() > 0
    # twin: another seed draws other members
    t["run"]["seed"] = 8
    assert not run_ensemble(t)["band_exceedance_probability"].equals(
        one["band_exceedance_probability"]
    )
