"""`walkers inspect` on a UGRID mesh file: the mesh summary and the map."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from click.testing import CliRunner

from walkers.cli import main
from walkers.engine.timestep import face_sizes
from walkers.fields.netcdf.ugrid import open_mesh_flow
from walkers.inspect import describe_mesh

DEMO = Path(__file__).resolve().parents[1] / "scenarios" / "curlew_basin_mesh.nc"


def test_inspect_summarises_the_mesh(tmp_path):
    png = tmp_path / "mesh.png"
    result = CliRunner().invoke(main, ["inspect", str(DEMO), "--map", str(png), "--frame", "18"])
    assert result.exit_code == 0, result.output
    out = result.output
    assert "180 nodes, 258 faces (224 triangles, 34 quadrilaterals)" in out
    assert "smallest face: 1044 m2" in out and "largest face: 4397 m2" in out
    assert "open boundary saltmarsh_entrance: 2 edges, 120 m" in out
    assert "WGS 84 / UTM zone 30N (EPSG:32630)" in out
    assert png.stat().st_size > 10_000


def test_time_step_advice_is_the_smallest_face_limit():
    """dt under size/|u| and size²/(2K) on every wet face (the grid rule, per face; size 4A/P:
    the side of a square, the inscribed circle's diameter of a triangle, common practice)."""
    flow = open_mesh_flow(DEMO)
    g = flow.geometry
    size = face_sizes(g)
    square = np.flatnonzero(g.nvert == 4)[0]
    side = g.edge_lengths()[square, 0]
    assert np.isclose(size[square], side, rtol=0.05)  # a near-square channel face
    speed = np.hypot(flow.u.data, flow.v.data) * flow.wet
    k = 5.0
    expected = min(np.min(size / speed.max(axis=0)), np.min(size**2 / (2 * k)))
    text = describe_mesh(flow, dispersion=k, dt=2 * expected)
    assert f"largest stable time step: {expected:.4g} s" in text
    assert "is too long" in text
