"""What a person reads: one concentration unit with plain numbers, UTC times from the run start,
the summary's wording (never exceeded, episodes, still rising, only open edges), map furniture."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from matplotlib.figure import Figure
from matplotlib.patches import Circle

from walkers.errors import InputError
from walkers.outputs.display import (
    concentration_unit,
    duration,
    hours_since_start,
    open_edges,
    plain,
    release_points,
)
from walkers.outputs.mapping import draw_furniture, draw_places
from walkers.outputs.summary import episodes, summary_text

sys.path.insert(0, str(Path(__file__).parent))
from results_fixture import gaussian_puff_results  # noqa: E402

SCENARIO = """
[run]
start = "2024-05-14T03:30:00Z"
[edges]
west = "reflecting"
north = "reflecting"
south = "reflecting"
[[receptors]]
name = "a"
x = "0 m"
y = "0 m"
thresholds = ["5 ug/L"]
"""


@pytest.mark.parametrize(
    ("value", "text"),
    [(1e-5 * 1e3, "0.01"), (0.000123456, "0.000123"), (12345.0, "12300"), (0.0, "0"), (2.5, "2.5")],
)
def test_numbers_are_plain_with_three_significant_figures(value, text):
    assert plain(value) == text


def test_display_unit_is_asked_else_the_thresholds_unit_else_mg_per_litre():
    ds = gaussian_puff_results(nt=5)
    assert concentration_unit(ds).name == "mg/L"
    assert concentration_unit(ds).text(1e-5) == "0.01 mg/L"
    ds.attrs["scenario"] = SCENARIO
    assert concentration_unit(ds).name == "ug/L"
    assert concentration_unit(ds).text(1e-5) == "10 ug/L"
    assert concentration_unit(ds, "g/m3").text(1e-5) == "0.01 g/m3"
    with pytest.raises(InputError, match="--units: unit 'm/s'"):
        concentration_unit(ds, "m/s")


def test_durations_in_hours_and_minutes():
    assert duration(9000.0) == "2 h 30 min"
    assert duration(2700.0) == "45 min"
    assert duration(7200.0) == "2 h"
    assert duration(0.0) == "0 min"


def test_episodes_are_unbroken_runs_above():
    assert episodes(np.array([False, True, True, False, True])) == [(1, 2), (4, 4)]
    assert episodes(np.zeros(4, dtype=bool)) == []


def test_times_count_from_the_run_start_in_utc():
    ds = gaussian_puff_results(nt=5)  # first output 2024-05-14T06:00+02:00 = 04:00 UTC
    ds.attrs["run_start"] = "2024-05-14T03:30:00+00:00"
    np.testing.assert_allclose(hours_since_start(ds), [0.5, 1.25, 2.0, 2.75, 3.5])
    text = summary_text(ds)
    assert "Run from 2024-05-14 03:30 UTC to 2024-05-14 07:00 UTC; all times in UTC." in text


def _one_receptor(series_mg_l, threshold_mg_l):
    ds = gaussian_puff_results(nt=len(series_mg_l))
    ds = ds.isel(receptor=[0], threshold=[0])
    ds["receptor_concentration"][:] = np.asarray(series_mg_l)[None] * 1e-3
    ds["receptor_threshold"][:] = threshold_mg_l * 1e-3
    return ds


def test_summary_says_never_exceeded():
    text = summary_text(_one_receptor([0.0, 0.001, 0.002, 0.001, 0.0], 0.01))
    assert "above 0.01 mg/L: never exceeded" in text
    assert "first at never" not in text


def test_summary_gives_first_exceedance_longest_episode_and_total():
    # output interval 45 min (3 h over 5 outputs); above at outputs 1, 2 and 4
    text = summary_text(_one_receptor([0.0, 0.02, 0.03, 0.001, 0.02], 0.01))
    assert "first at 2024-05-14 04:45 UTC (45 min after the run start)" in text
    assert "2 episodes, the longest 1 h 30 min, 2 h 15 min in all" in text
    assert "still rising at the end of the run" not in text


def test_summary_warns_when_the_peak_is_the_last_output():
    text = summary_text(_one_receptor([0.0, 0.001, 0.002, 0.003, 0.004], 0.01))
    assert "peak 0.004 mg/L" in text
    assert "still rising at the end of the run" in text


def test_summary_lists_only_edges_that_mass_can_go_out_through():
    ds = gaussian_puff_results(nt=5)
    assert open_edges(ds) == ["west", "east", "south", "north"]  # absorbing by default
    ds.attrs["scenario"] = ""
    assert open_edges(ds) == ["east"]  # no scenario: the edges some mass went out through
    ds.attrs["scenario"] = SCENARIO
    assert open_edges(ds) == ["east"]  # the scenario makes only east absorbing
    text = summary_text(ds)
    assert "out through the east edge" in text
    assert "west edge" not in text and "north edge" not in text


def test_maps_mark_the_release_the_receptor_circles_and_the_furniture():
    ds = gaussian_puff_results(nt=5)
    ds.attrs["scenario"] = SCENARIO
    ds.attrs["release_places"] = '[{"name": "test spill", "x": 200.0, "y": 0.0}]'
    ds["receptor_radius"] = ("receptor", np.array([100.0, 0.0, 50.0]), {"units": "m"})
    ds = ds.set_coords("receptor_radius")
    assert release_points(ds) == [("test spill", 200.0, 0.0)]
    ax = Figure().add_subplot()
    draw_places(ax, ds)
    draw_furniture(ax, ds)
    circles = [p for p in ax.patches if isinstance(p, Circle)]
    assert sorted(c.get_radius() for c in circles) == [50.0, 100.0]
    assert any(line.get_marker() == "*" for line in ax.lines)  # the release
    assert "release: test spill" in [t.get_text() for t in ax.texts]
    assert "N" in [t.get_text() for t in ax.texts]  # north arrow
    assert any(t.get_text().endswith(" m") or t.get_text().endswith(" km") for t in ax.texts)
    assert ax.get_xlabel().startswith("easting (m), WGS 84 / UTM zone 31N")
    assert ax.get_ylabel() == "northing (m)"
