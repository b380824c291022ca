"""The demo mesh file (scenarios/curlew_basin_mesh.nc): reproducible, read by the UGRID reader as
a mixed mesh with its open boundary, small, and volume-consistent column by column."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from walkers.fields.netcdf.ugrid import open_mesh_flow

ROOT = Path(__file__).resolve().parents[1]
FILE = ROOT / "scenarios" / "curlew_basin_mesh.nc"


def _builder():
    spec = importlib.util.spec_from_file_location(
        "make_demo_mesh", ROOT / "scenarios" / "make_demo_mesh.py"
    )
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


mdm = _builder()


@pytest.fixture(scope="module")
def flow():
    return open_mesh_flow(FILE)


def test_regenerated_mesh_equals_committed(tmp_path):
    mdm.main(["--outdir", str(tmp_path)])
    with (
        xr.open_dataset(FILE, decode_times=False) as old,
        xr.open_dataset(tmp_path / FILE.name, decode_times=False) as new,
    ):
        assert set(old.variables) == set(new.variables)
        for var in old.variables:
            np.testing.assert_array_equal(old[var].values, new[var].values, err_msg=var)
        assert old.attrs == new.attrs
    assert FILE.stat().st_size < 1e6


def test_demo_mesh_is_mixed_with_its_open_boundary(flow):
    g = flow.geometry
    assert (g.nvert == 3).sum() > 100 and (g.nvert == 4).sum() > 20
    assert flow.open_boundaries.names == ("saltmarsh_entrance",)
    assert flow.open_boundaries.edge_count("saltmarsh_entrance") == mdm.CHANNEL[1]
    assert "UTM zone 30N" in g.crs_wkt
    wet = flow.wet.sum(axis=1)
    assert wet.max() == g.nface and wet.min() < 0.8 * g.nface  # the basin's head dries


def test_discharge_through_each_column_balances_the_wet_area_east_of_it(flow):
    """Long-wave continuity (Vreugdenhil 1994, Numerical Methods for Shallow-Water Flow, ch. 2,
    from memory): with a uniform water level the discharge eastward through a section equals
    d(eta)/dt times the wet area east of it. Each lattice column's discharge (Σ u h Δy over its
    wet faces, Δy = 60 m) is compared with d(eta)/dt (the central difference of the tide) times
    the wet area east of the column's centre; the bound is the velocity rounding (2^-17 m/s)
    times the column's wet section."""
    g = flow.geometry
    x, y, faces, column = mdm.build_mesh()
    times = flow.times
    rate = (mdm.tide(times + 1800.0) - mdm.tide(times - 1800.0)) / 3600.0
    u, h = flow.u.data, flow.depth.data
    wet = flow.wet.astype(bool)
    worst = 0.0
    for i in np.unique(column):
        here = column == i
        q = np.sum(u[:, here] * h[:, here] * g.area[here], axis=1) / mdm.CELL
        east = np.sum(np.where(wet & (column > i), g.area, 0.0), axis=1)
        half = 0.5 * np.sum(np.where(wet & here, g.area, 0.0), axis=1)
        bound = 2.0**-17 * np.sum(h[:, here] * g.area[here], axis=1) / mdm.CELL + 1e-9
        assert np.all(np.abs(q - rate * (east + half)) <= bound), i
        worst = max(worst, float(np.max(np.abs(rate * (east + half)))))
    assert worst > 10.0  # m3/s: the check is not on a still basin
    # the twin: the flow reversed (ebb for flood) does not balance
    q0 = np.sum(-u[:, column == 0] * h[:, column == 0] * g.area[column == 0], axis=1) / mdm.CELL
    east0 = np.sum(np.where(wet & (column > 0), g.area, 0.0), axis=1)
    assert np.max(np.abs(q0 - rate * east0)) > 10.0
