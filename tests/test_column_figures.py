"""Figures of a three-dimensional run: the deposit map, the profiles at receptors and the vertical
section are written as valid images, carry the caution, and reach the HTML report."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from PIL import Image

import walkers
from walkers.outputs import figures_column
from walkers.outputs.figures import _load, report_figures
from walkers.outputs.report import _CAPTIONS
from walkers.outputs.writer import write_results

sys.path.insert(0, str(Path(__file__).parent))
from column_fixture import column_results  # noqa: E402

COLUMN_FIGURES = ["deposit.png", "receptor_profiles.png", "section.png"]


@pytest.fixture(scope="module")
def drawn(tmp_path_factory):
    """The figures of the fixture's result, read back from its file (those of ``walkers run`` and
    the report: the summary figures), and the texts of every water-column figure drawn."""
    folder = tmp_path_factory.mktemp("column")
    path = write_results(column_results()[0], folder / "column.nc")
    outdir = folder / "figures"
    outdir.mkdir()
    texts: dict[str, list[str]] = {}
    original = figures_column._figure
    made = []

    def recording(*args, **kwargs):
        made.append(original(*args, **kwargs))
        return made[-1]

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(figures_column, "_figure", recording)
        paths = report_figures(path, outdir)
    for fig, name in zip(made, COLUMN_FIGURES, strict=True):
        texts[name] = [t.get_text() for t in fig.texts]
    return paths, texts


def test_column_figures_are_written_as_valid_images(drawn):
    paths, _ = drawn
    names = [p.name for p in paths]
    for name in COLUMN_FIGURES:
        assert name in names
    for path in paths:
        if path.name in COLUMN_FIGURES:
            with Image.open(path) as image:
                image.verify()
            with Image.open(path) as image:
                assert 300 <= image.size[0] <= 2_000 and 250 <= image.size[1] <= 2_000
                rgb = np.asarray(image.convert("RGB"), dtype=int)
            assert ((rgb.max(axis=2) - rgb.min(axis=2)) > 60).mean() > 0.01  # colour drawn


def test_every_column_figure_carries_the_caution(drawn):
    _, texts = drawn
    first_words = " ".join(walkers.CAUTION.split()[:6])
    for name in COLUMN_FIGURES:
        joined = " ".join(" ".join(texts[name]).split())
        assert first_words in joined, name


def test_a_section_no_particle_came_near_is_drawn_empty(tmp_path):
    ds = column_results(nt=2)[0]
    ds["section_concentration"][:] = 0.0
    ds["section_depth"][:] = np.nan
    paths = figures_column.column_figures(_load(ds, None, None), tmp_path)
    assert (tmp_path / "section.png").is_file() and len(paths) == 3


def test_the_report_shows_the_column_figures_with_captions(drawn):
    # the report inlines what report_figures draws (the fixture's paths), captioned by file name
    paths, _ = drawn
    for name in COLUMN_FIGURES:
        assert name in [p.name for p in paths]
        assert _CAPTIONS[name].endswith(".")


def test_the_section_bed_takes_the_depth_at_each_time_and_fills_the_gaps():
    # bins 0 and 2 have particles at some times; bin 1 never: the time-mean of its neighbours,
    # linearly along the line
    depth = np.array([[4.0, np.nan], [np.nan, np.nan], [8.0, 6.0]])
    ds = xr.Dataset(
        {"section_depth": (("section_distance", "time"), depth)},
        coords={"section_distance": [0.0, 10.0, 20.0]},
    )
    np.testing.assert_allclose(
        figures_column._section_depths(ds), [[4.0, 4.0], [5.5, 5.5], [8.0, 6.0]]
    )
