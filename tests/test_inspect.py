"""The flow report and speed map of ``walkers inspect``.

Numbers in the report are checked against values computed here from the analytic test flow
(tests/flowfiles.py); the time-step advice is the common-practice rule that neither |u| dt nor
sqrt(2 K dt) exceeds one grid cell.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

import matplotlib.image
import numpy as np
import pytest

from walkers import CAUTION
from walkers.fields.netcdf.open import open_flow
from walkers.inspect import _iso_duration, describe_flow, draw_speed_map

sys.path.insert(0, str(Path(__file__).parent))
import flowfiles as ff  # noqa: E402


def _number(pattern: str, text: str) -> float:
    m = re.search(pattern, text)
    assert m is not None, f"{pattern!r} not in report:\n{text}"
    return float(m.group(1))


def _true_speed_range():
    Xc, Yc = np.meshgrid(ff.X, ff.Y)
    water = ~ff.island(Xc, Yc)
    speeds = [np.hypot(*ff.velocity(Xc, Yc, t))[water] for t in ff.TIMES]
    return min(s.min() for s in speeds), max(s.max() for s in speeds)


@pytest.fixture(scope="module")
def island_file(tmp_path_factory):
    return ff.write_flow(tmp_path_factory.mktemp("flow") / "estuary.nc", land=ff.island, mask=True)


def test_report_names_grid_crs_times_and_roles(island_file):
    text = describe_flow(island_file, dispersion=2.0)
    assert "estuary.nc" in text
    assert "21 x 11 cells (x by y), 2-D, projected" in text
    assert "spacing x: 100 to 100 m" in text and "spacing y: 100 to 100 m" in text
    assert "extent: x 450 to 2550, y 150 to 1250 m" in text
    assert "WGS 84 / UTM zone 33N (EPSG:32633)" in text
    assert "2026-03-01T00:00:00+00:00 to 2026-03-01T04:00:00+00:00, 5 frames every PT1H" in text
    for role, name in (("u", "u"), ("v", "v"), ("depth", "depth"), ("mask", "mask")):
        assert re.search(rf"^\s+{role}\s+{name}\b", text, re.M)
    assert CAUTION in text


def test_report_land_fraction_and_speed_range(island_file):
    text = describe_flow(island_file)
    dry = _number(r"land or dry cells: ([\d.]+) %", text)
    assert dry == pytest.approx(100 * 9 / 231, abs=0.05)  # 3 x 3 island cells of 21 x 11
    lo, hi = _true_speed_range()
    assert _number(r"speed in water: ([\d.]+) to", text) == pytest.approx(lo, rel=1e-3)
    assert _number(r"speed in water: [\d.]+ to ([\d.]+) m s-1", text) == pytest.approx(hi, rel=1e-3)


def _true_component_maxima():
    Xc, Yc = np.meshgrid(ff.X, ff.Y)
    water = ~ff.island(Xc, Yc)
    comps = [ff.velocity(Xc, Yc, t) for t in ff.TIMES]
    return (
        max(np.abs(np.broadcast_to(c[0], Xc.shape))[water].max() for c in comps),
        max(np.abs(np.broadcast_to(c[1], Xc.shape))[water].max() for c in comps),
    )


@pytest.mark.parametrize("dispersion", [0.5, 2.0, 50.0])
def test_report_largest_stable_time_step(island_file, dispersion):
    """Each velocity component against the cell width along its own axis (100 m both ways)."""
    text = describe_flow(island_file, dispersion=dispersion)
    umax, vmax = _true_component_maxima()
    expected = min(100.0 / umax, 100.0 / vmax, 100.0**2 / (2.0 * dispersion))
    got = _number(r"largest stable time step: ([\d.e+]+) s", text)
    assert got == pytest.approx(expected, rel=1e-3)


def test_report_judges_a_given_time_step(island_file):
    assert "time step 60 s fits" in describe_flow(island_file, dispersion=1.0, dt=60.0)
    assert "is too long" in describe_flow(island_file, dispersion=1.0, dt=600.0)


def test_report_of_a_geographic_grid_gives_cell_sizes_in_metres(tmp_path):
    lon, lat = np.linspace(11.0, 11.2, 21), np.linspace(54.0, 54.1, 11)
    p = ff.write_flow(tmp_path / "ll.nc", x=lon, y=lat, geographic=True, crs=None)
    text = describe_flow(p)
    assert "geographic (longitude/latitude)" in text and "EPSG:4326" in text
    # 0.01 degree of longitude at 54.0-54.1 N is about 654 m; 0.01 degree of latitude 1113 m
    assert re.search(r"cell size: 65\d\.\d to 65\d\.\d m along x, 111\d\.\d to 111\d\.\d m", text)


def test_report_of_a_channel(tmp_path):
    text = describe_flow(ff.write_channel(tmp_path / "canal.nc"))
    assert "51 x 1 cells (x by y), 1-D channel" in text and "area" in text


def test_iso_durations():
    assert _iso_duration(3600) == "PT1H"
    assert _iso_duration(5400) == "PT1H30M"
    assert _iso_duration(90061) == "P1DT1H1M1S"
    assert _iso_duration(0) == "PT0S"


def test_speed_map_png_has_land_in_grey(island_file, tmp_path):
    png = tmp_path / "speed.png"
    draw_speed_map(open_flow(island_file), png, frame=2)
    img = matplotlib.image.imread(png)
    assert img.shape[:2] == (600, 800)
    grey = np.all(np.abs(img[:, :, :3] - 0.7) < 0.01, axis=2)
    assert grey.sum() > 100  # the island


def test_speed_map_of_a_channel(tmp_path):
    png = tmp_path / "canal.png"
    draw_speed_map(open_flow(ff.write_channel(tmp_path / "canal.nc")), png)
    assert matplotlib.image.imread(png).shape[:2] == (400, 800)
