"""Figures of a run: every file is written, is a valid image of sensible size, the GIF animates."""

from __future__ import annotations

import sys
from pathlib import Path

import matplotlib
import numpy as np
import pytest
import xarray as xr
from PIL import Image

from walkers.errors import InputError
from walkers.outputs.figures import plot_results
from walkers.outputs.writer import write_results

sys.path.insert(0, str(Path(__file__).parent))
from results_fixture import gaussian_puff_results  # noqa: E402

NT = 5


def _check_images(paths: list[Path], frames: int) -> None:
    for path in paths:
        assert path.is_file() and path.stat().st_size > 5_000, path
        with Image.open(path) as image:
            image.verify()  # a complete, uncorrupted file
        with Image.open(path) as image:
            width, height = image.size
            assert 300 <= width <= 2_000 and 250 <= height <= 2_000, (path.name, image.size)
            if path.suffix == ".gif":
                assert image.n_frames == frames > 1


@pytest.fixture(scope="module")
def projected_figures(tmp_path_factory):
    outdir = tmp_path_factory.mktemp("figures")
    backend = matplotlib.get_backend()
    paths = plot_results(gaussian_puff_results(nt=NT), outdir)
    return outdir, paths, backend


def test_all_figures_are_written_as_valid_images(projected_figures):
    outdir, paths, _ = projected_figures
    names = sorted(p.name for p in paths)
    assert names == sorted(
        [
            "concentration_max.png",
            "concentration_t0001.png",
            "concentration_t0003.png",
            "concentration_t0004.png",
            "mass_budget.png",
            "plume.gif",
            "receptors.png",
        ]
    )
    assert sorted(p.name for p in outdir.iterdir()) == names
    _check_images(paths, frames=NT)


def test_plotting_leaves_the_callers_backend_alone(projected_figures):
    *_, backend = projected_figures
    assert matplotlib.get_backend() == backend


def test_maps_show_colour_where_there_is_mass_and_blank_elsewhere(projected_figures):
    outdir, *_ = projected_figures
    with Image.open(outdir / "concentration_t0001.png") as image:
        rgb = np.asarray(image.convert("RGB"), dtype=int)
    saturated = (rgb.max(axis=2) - rgb.min(axis=2)) > 60  # colour-scale cells, receptor marks
    white = (rgb.min(axis=2) > 250).mean()
    assert 0.01 < saturated.mean() < 0.6
    assert white > 0.3  # the empty water and the margins stay blank


def test_figures_from_a_geographic_file_with_chosen_times(tmp_path):
    path = write_results(gaussian_puff_results(geographic=True, nt=NT), tmp_path / "geo.nc")
    outdir = tmp_path / "figs"
    outdir.mkdir()
    paths = plot_results(path, outdir, times=[0.0, 2700.0, 2800.0])  # 2700 and 2800 -> index 1
    names = [p.name for p in paths]
    assert "concentration_t0000.png" in names and "concentration_t0001.png" in names
    assert sum(n.startswith("concentration_t") for n in names) == 2
    _check_images(paths, frames=NT)


def test_one_dimensional_run_gives_profiles(tmp_path):
    ds = gaussian_puff_results(ny=1, nt=NT, land=False, receptors=False)
    paths = plot_results(ds, tmp_path, times=[5400.0])
    assert sorted(p.name for p in paths) == [
        "concentration_max.png",
        "concentration_t0002.png",
        "mass_budget.png",
        "plume.gif",
    ]
    _check_images(paths, frames=NT)


def test_a_land_mask_given_by_the_caller_must_match_the_grid(tmp_path):
    ds = gaussian_puff_results(nt=3)
    wrong = xr.DataArray(np.zeros((3, 3), dtype=bool), dims=("y", "x"))
    with pytest.raises(InputError, match="land mask shape"):
        plot_results(ds, tmp_path, land=wrong)


def test_times_outside_the_run_and_missing_folders_are_input_errors(tmp_path):
    ds = gaussian_puff_results(nt=3)
    with pytest.raises(InputError, match="figure time"):
        plot_results(ds, tmp_path, times=[1.0e9])
    with pytest.raises(InputError, match="does not exist"):
        plot_results(ds, tmp_path / "absent")


def test_a_small_result_is_read_whole_a_large_one_frame_by_frame(tmp_path, monkeypatch):
    """Fields within the run's memory budget are read at once; above it they stay on disk as
    one dask chunk per output time, so a result larger than memory can still be drawn. Both
    give the same numbers."""
    from walkers.outputs import figures
    from walkers.run import store

    path = write_results(gaussian_puff_results(nt=NT), tmp_path / "puff.nc")
    whole = figures._load(path, None, None).ds["concentration"]
    monkeypatch.setattr(store, "FIELD_MEMORY_BUDGET", 0)
    streamed = figures._load(path, None, None).ds["concentration"]
    assert whole.chunks is None
    assert streamed.chunks is not None and streamed.chunks[0] == (1,) * NT
    np.testing.assert_array_equal(whole.values, streamed.values)
