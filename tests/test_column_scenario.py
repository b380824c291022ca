"""The [output] keys of the water-column outputs: bands, profiles, section (walkers.scenario)."""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import pytest

from walkers.errors import InputError
from walkers.scenario.column_output import ColumnOutput, default_bands

sys.path.insert(0, str(Path(__file__).parent))
from test_scenario import base, load  # noqa: E402


def test_a_scenario_without_column_keys_gets_the_default_outputs():
    out = load(base()).column_output
    assert out == ColumnOutput()
    assert [b.name for b in out.bands] == [b.name for b in default_bands()]
    assert out.section is None and out.levels == 10


def test_bands_profiles_and_section_in_si_units():
    data = base()
    data["output"]["bands"] = [
        {"name": "top", "reference": "surface", "end": "50 cm"},
        {"name": "near_bed", "reference": "bed", "start": "1 m", "end": "300 cm"},
        {"name": "all", "reference": "column"},
    ]
    data["output"]["profiles"] = {"levels": 5}
    data["output"]["section"] = {
        "name": "thalweg",
        "points": [["1 km", 0], ["5 km", "200 m"], [8000, 0]],
        "width": "100 m",
        "spacing": "0.25 km",
    }
    out = load(data).column_output
    assert [(b.name, b.reference, b.limits) for b in out.bands] == [
        ("top", "surface", (0.0, 0.5)),
        ("near_bed", "bed", (1.0, 3.0)),
        ("all", "column", (0.0, math.inf)),
    ]
    assert out.levels == 5
    assert out.heights == pytest.approx([0.1, 0.3, 0.5, 0.7, 0.9])
    assert out.section is not None
    np.testing.assert_array_equal(out.section.points, [[1000, 0], [5000, 200], [8000, 0]])
    assert (out.section.width, out.section.spacing) == (100.0, 250.0)


@pytest.mark.parametrize(
    ("band", "message"),
    [
        ({"name": "b", "reference": "bed"}, "give end"),
        ({"name": "b", "reference": "surface", "start": "2 m", "end": "1 m"}, "less than end"),
        ({"name": "b", "reference": "column", "end": "1 m"}, "leave out start and end"),
        ({"name": "b", "reference": "middle", "end": "1 m"}, "reference"),
        ({"name": "b", "reference": "bed", "end": "1 kg"}, "end"),
    ],
)
def test_bad_bands_are_named(band, message):
    data = base()
    data["output"]["bands"] = [band]
    with pytest.raises(InputError, match=message):
        load(data)


def test_a_section_needs_its_width_and_points():
    data = base()
    data["output"]["section"] = {"points": [[0, 0], [10, 0]], "spacing": "1 m"}
    with pytest.raises(InputError, match="width"):
        load(data)
    data["output"]["section"] = {"width": "1 m", "spacing": "1 m"}
    with pytest.raises(InputError, match="points"):
        load(data)
    data["output"]["section"] = {"points": [[0, 0]], "width": "1 m", "spacing": "1 m"}
    with pytest.raises(InputError, match="two or more"):
        load(data)
