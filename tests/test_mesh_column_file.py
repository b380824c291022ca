"""The vertical velocity w and the vertical diffusivity K_z of a UGRID mesh file in a
three-dimensional run (walkers.fields.netcdf.ugrid_fields._column_variable; walkers.run.column).

The files are written the way ocean models write them: u and v at the centres of sigma layers,
w and K_z on the layer interfaces (their own ocean_sigma_coordinate, surface and bed included),
K_z on the nodes and w on the nodes or the faces (CF-1.8 Appendix D; UGRID 1.0).

Sources: the well-mixed condition of the vertical walk (Visser 1997, "Using random walk models to
simulate the vertical distribution of particles in a turbulent water column", Mar. Ecol. Prog.
Ser. 158, 275-281), χ² at the 5σ level, with the drift-free walk as the twin that fails; the
parabolic K_z = κ u* z (1 − z/h) (e.g. Fischer et al. 1979, Mixing in Inland and Coastal Waters,
§5.1, from memory); advection by w alone, z(t) = z0 + w t (exact).

The runs share one option set of the step (a mesh, K_z and w from the file).
"""

from __future__ import annotations

import numpy as np
import pytest
from mesh_files import jittered_mesh, write_ugrid
from scipy import stats
from test_mesh_column import corner_mean, without_vertical_drift

from walkers.engine.state import IN_WATER
from walkers.errors import InputError
from walkers.fields.mesh import build_geometry
from walkers.fields.mesh_field import mesh_field
from walkers.fields.netcdf.ugrid import open_mesh_flow
from walkers.run.simulate import simulate
from walkers.scenario.config import Dispersion, OutputGrid, Release, Transport, Vertical

FIVE_SIGMA = 2.0 * stats.norm.sf(5.0)
CELL = 200.0  # m
GRID = OutputGrid(x0=100.0, dx=200.0, nx=12, y0=100.0, dy=200.0, ny=8)
NL = 8  # sigma layers of u and v
DEPTH = 10.0  # m, a flat bed
KAPPA, USTAR = 0.41, 0.03  # von Kármán's constant (common practice); u* (m s-1)
INTERFACES = -np.linspace(0.0, 1.0, NL + 1)  # sigma of the interfaces, surface first


def mesh():
    x, y, faces = jittered_mesh(12, 8, CELL, jitter=40.0, seed=7)
    return x, y, faces, build_geometry(x, y, faces, where="test")


def column_file(tmp_path, kz_nodes, w_values, w_location="node", kz_units="m2 s-1", w_name=True):
    """A steady mesh file at rest (u = v = 0 in NL sigma layers), a flat bed DEPTH m down, and
    on the NL + 1 interfaces K_z (time, interface, node) and w (time, interface, w_location)
    as models write them. ``w_name`` False: w without its standard name (not read)."""
    x, y, faces, g = mesh()
    zero = np.zeros((1, NL, x.size))
    sigma = -(np.arange(NL) + 0.5)[::-1] / NL  # layer centres, top first

    def add(ds):
        ds.createDimension("interface", NL + 1)
        lev = ds.createVariable("interface", "f8", ("interface",))
        lev.standard_name, lev.positive = "ocean_sigma_coordinate", "up"
        lev.formula_terms = "sigma: interface eta: eta depth: bed"
        lev[:] = INTERFACES
        kz = ds.createVariable("kh", "f8", ("time", "interface", "nMesh2_node"))
        kz.mesh, kz.location = "Mesh2", "node"
        kz.standard_name, kz.units = "ocean_vertical_diffusivity", kz_units
        kz[:] = kz_nodes[None]
        dim = "nMesh2_node" if w_location == "node" else "nMesh2_face"
        w = ds.createVariable("ww", "f8", ("time", "interface", dim))
        w.mesh, w.location, w.units = "Mesh2", w_location, "m s-1"
        if w_name:
            w.standard_name = "upward_sea_water_velocity"
        w[:] = w_values[None]

    fields = {
        "u": ("node", zero),
        "v": ("node", zero),
        "eta": ("node", np.zeros((1, x.size))),
        "bed": ("node", np.full((1, x.size), DEPTH)),
    }
    path = write_ugrid(tmp_path / "column.nc", x, y, faces, fields=fields, sigma=sigma, edit=add)
    return path, g


def parabolic_kz(nnode):
    """κ u* z (1 − z/h) at the interfaces (surface first, as written), on every node."""
    z = (1.0 + INTERFACES) * DEPTH
    return np.repeat((KAPPA * USTAR * z * (1.0 - z / DEPTH))[:, None], nnode, axis=1)


def held_run(flow, release, end, dt=60.0):
    """simulate() of one release with no horizontal dispersion, K_z and w from the file; the
    particles at ``end``."""
    last = {}
    tr = Transport(dt=dt, dispersion=Dispersion(k1=0.0, k2=0.0), vertical=Vertical("file"))
    simulate(
        flow,
        tr,
        [release],
        start=0.0,
        end=end,
        output_interval=end,
        output_grid=GRID,
        seed=5,
        on_output=lambda rs: last.update(p=rs.particles.copy()),
    )
    return last["p"]


def test_kz_and_w_of_a_mesh_file_are_kept_on_their_interfaces_and_faces(tmp_path):
    """K_z on the nodes' interfaces is kept on the interface heights (0 bed ... 1 surface,
    ascending) as each face's mean of its corners (computed here from the face-node table); w on
    the faces as written. The twin: the node values of the faces' first corners do not match."""
    x, _, _, g = mesh()
    kz = parabolic_kz(x.size) * (1.0 + x / 2400.0)[None, :]
    w = np.linspace(1e-4, 3e-4, NL + 1)[:, None] * np.ones((1, g.nface))
    path, g = column_file(tmp_path, kz, w, w_location="face")
    layers = open_mesh_flow(path, column=True).layers
    np.testing.assert_allclose(layers.kz_levels, np.linspace(0.0, 1.0, NL + 1), atol=1e-12)
    np.testing.assert_allclose(layers.w_levels, np.linspace(0.0, 1.0, NL + 1), atol=1e-12)
    expect = np.array([corner_mean(g, row) for row in kz[::-1]])  # bed first
    np.testing.assert_allclose(layers.kz.data[0], expect, rtol=1e-12)
    np.testing.assert_allclose(layers.w.data[0], w[::-1], rtol=1e-12)
    first_corner = kz[::-1][:, g.face_nodes[:, 0]]
    assert not np.allclose(layers.kz.data[0], first_corner, rtol=1e-6)
    flow = mesh_field(open_mesh_flow(path, column=True))
    assert "K_z: from 'kh' on 9 levels on the faces" in flow.attrs["column"]
    assert flow.column.kz.units == "m2 s-1"


def test_kz_of_a_mesh_file_in_wrong_units_is_refused_with_its_name(tmp_path):
    x, _, _, g = mesh()
    path, _ = column_file(
        tmp_path, parabolic_kz(x.size), np.zeros((NL + 1, x.size)), kz_units="cm2 s-1"
    )
    with pytest.raises(InputError, match=r"variable 'kh' \(ocean_vertical_diffusivity\) has units"):
        open_mesh_flow(path, column=True)


@pytest.mark.parametrize("drift", [True, False])
def test_well_mixed_release_stays_well_mixed_under_the_kz_of_a_mesh_file(
    tmp_path, drift, monkeypatch
):
    """2000 particles spread uniformly over a 10 m column under the parabolic K_z written in
    the file (u* = 0.03 m/s; K_z linear between 9 interfaces, the drift its slope): after 7200 s
    (2.2 mixing times h²/K_max) their heights are still uniform, χ² over 20 bins at the 5σ
    level (Visser 1997). The twin without the drift dK_z/dz gathers them where K_z is low and
    fails."""
    if not drift:
        without_vertical_drift(monkeypatch)
    x, _, _, g = mesh()
    path, _ = column_file(tmp_path, parabolic_kz(x.size), np.zeros((NL + 1, x.size)))
    flow = mesh_field(open_mesh_flow(path, column=True))
    release = Release("point", np.array([[1200.0, 800.0]]), 2000, mass=1.0, start_height="column")
    p = held_run(flow, release, 7200.0)
    assert np.all(p.status == IN_WATER)
    counts = np.histogram(p.sigma, bins=20, range=(0.0, 1.0))[0]
    pvalue = stats.chisquare(counts).pvalue
    assert (pvalue > FIVE_SIGMA) == drift, pvalue


def test_particles_rise_with_the_w_of_a_mesh_file(tmp_path):
    """K_z = 0 and w on the nodes growing along x, the same at every interface: particles held
    in their faces rise by w t, w the mean of their face's corners (the reader's rule; computed
    here), to 1e-9 m after 3600 s. The twin, w without its standard name, is not read: the
    particles stay at their start height and fail the same check."""
    x, _, _, g = mesh()
    w_nodes = 1e-4 * (1.0 + x / 2400.0)
    w = np.repeat(w_nodes[None, :], NL + 1, axis=0)
    release = Release(
        "point",
        np.array([[500.0, 500.0], [1300.0, 900.0], [2100.0, 1300.0]]),
        300,
        mass=1.0,
        start_height="above_bed",
        height_above_bed=2.0,
    )
    for named in (True, False):
        path, g = column_file(tmp_path, np.zeros((NL + 1, x.size)), w, w_name=named)
        flow = mesh_field(open_mesh_flow(path, column=True))
        p = held_run(flow, release, 3600.0)
        faces = flow.kind().locate(p.x, p.y)
        assert np.all(faces >= 0)
        rise = corner_mean(g, w_nodes)[faces] * 3600.0
        z = p.sigma * DEPTH
        assert np.allclose(z, 2.0 + rise, rtol=0.0, atol=1e-9) == named, z[:3]
