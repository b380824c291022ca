"""Layered flow files kept for three-dimensional runs (walkers.fields.netcdf.column): velocities
on their layers' heights as fractions of the depth, w and K_z by CF standard name, written the
way models write them (sigma with formula_terms, z levels positive down on a staggered grid)."""

from __future__ import annotations

import layered_files as lf
import numpy as np
import pytest

from walkers.engine import mover, vertical
from walkers.engine.state import ParticleState
from walkers.errors import InputError
from walkers.fields.netcdf.open import open_flow
from walkers.scenario.config import Dispersion, Transport

KAPPA, U_STAR, Z0 = 0.41, 0.05, 0.002  # von Kármán (common practice), m s-1, m
SIGMA = np.array([-0.025, -0.125, -0.325, -0.725])  # uneven layers' points, surface first
W_SIGMA = np.array([0.0, -0.05, -0.2, -0.45, -1.0])  # the layer faces (w and K_z points)


def log_law(height):
    """u(z) = (u*/κ) ln(z/z0) (the law of the wall; Fischer et al. 1979, §5.1, from memory)."""
    return U_STAR / KAPPA * np.log(height / Z0)


def sigma_file(tmp_path, with_column_variables=True):
    """A sigma-coordinate file (formula_terms, CF-1.8 Appendix D) whose u follows the log law at
    each layer's point, v = u / 2; with w and K_z on the layer faces when asked."""
    total = lf.BED_DEPTH[None] + lf.ETA  # (t, y, x)
    height = (1.0 + SIGMA)[None, :, None, None] * total[:, None]
    u = log_law(height)

    def add(ds):
        ds.createDimension("face", W_SIGMA.size)
        c = ds.createVariable("face", "f8", ("face",))
        c.standard_name, c.positive = "ocean_sigma_coordinate", "up"
        c.formula_terms = "sigma: face eta: zeta depth: h"
        c[:] = W_SIGMA
        s = (1.0 + W_SIGMA)[None, :, None, None]
        w = ds.createVariable("w", "f8", ("time", "face", "y", "x"))
        w.standard_name, w.units = "upward_sea_water_velocity", "m s-1"
        w[:] = np.broadcast_to(1e-3 * s, (2, W_SIGMA.size, 2, 3))
        k = ds.createVariable("akt", "f8", ("time", "face", "y", "x"))
        k.standard_name, k.units = "ocean_vertical_tracer_diffusivity", "m2 s-1"
        k[:] = np.broadcast_to(0.01 * s * (1.0 - s), (2, W_SIGMA.size, 2, 3))

    return lf.write_parametric(
        tmp_path / "sigma3d.nc",
        "ocean_sigma_coordinate",
        {"sigma": SIGMA},
        u,
        0.5 * u,
        edit=add if with_column_variables else None,
    ), u


def test_sigma_file_keeps_its_layers_at_their_fractions_of_the_depth(tmp_path):
    """Sigma layers lie at fixed fractions 1 + sigma of the depth (CF-1.8 Appendix D): the kept
    profile is the file's, bed first; the depth-averaged u, v are those of a 2-D open."""
    path, u = sigma_file(tmp_path)
    flow = open_flow(path, column=True)
    assert flow.column is not None
    np.testing.assert_allclose(flow.column.levels, (1.0 + SIGMA)[::-1], rtol=0, atol=1e-12)
    win = flow.window(0.0, 3600.0)
    got = win.column.u.reshape(2, 4, 2, 3)
    np.testing.assert_allclose(got, u[:, ::-1], rtol=1e-12)
    np.testing.assert_allclose(win.column.v.reshape(2, 4, 2, 3), 0.5 * u[:, ::-1], rtol=1e-12)
    flat = open_flow(path).window(0.0, 3600.0)
    np.testing.assert_array_equal(win.u, flat.u)
    np.testing.assert_array_equal(win.depth, flat.depth)
    assert "velocity in 4 levels" in flow.attrs["column"]


def test_particles_at_fixed_heights_move_at_the_log_law_speed_read_from_the_file(tmp_path):
    """End to end: particles at a velocity point, at each layer's height, K = 0, one Euler step
    of 10 s: their speeds are the log law at their heights (1e-6 relative). The twin, the same
    file opened depth-averaged, moves all at the depth mean and fails."""
    path, u = sigma_file(tmp_path)
    tr = Transport(
        dt=10.0,
        dispersion=Dispersion(k1=0.0, k2=0.0),
        edges=dict.fromkeys(("west", "east", "south", "north"), "reflecting"),
    )
    for column, expect_ok in ((True, True), (False, False)):
        flow = open_flow(path, column=column)
        win = flow.window(0.0, 3600.0)
        inputs = mover.kernel_inputs(flow, win, tr)
        inputs = mover.with_column(inputs, win.depth, 0.0, vertical.KZ_CONSTANT, layers=win.column)
        n = SIGMA.size
        state = ParticleState.from_arrays(
            np.full(n, 100.0), np.full(n, 0.0), np.ones(n), np.zeros(n)
        ).in_column((1.0 + SIGMA)[::-1])
        mover.advance(state, inputs, 0.0, 10.0, 1, 0, 1)
        total = lf.BED_DEPTH[0, 1] + lf.ETA[0, 0, 1]
        expect = log_law((1.0 + SIGMA)[::-1] * total)
        ok = np.allclose((state.x - 100.0) / 10.0, expect, rtol=1e-6, atol=0.0)
        assert ok == expect_ok


def test_w_and_kz_are_read_by_standard_name_on_their_own_levels(tmp_path):
    """upward_sea_water_velocity and ocean_vertical_tracer_diffusivity (CF standard name table,
    ../shared/cf-tables) on the layer faces: kept on the faces' fractions of the depth; a file
    without them says so (no vertical advection)."""
    path, _ = sigma_file(tmp_path)
    flow = open_flow(path, column=True)
    col = flow.column
    assert col is not None and col.w is not None and col.kz is not None
    s = (1.0 + W_SIGMA)[::-1]
    np.testing.assert_allclose(col.w_levels, s, atol=1e-12)
    win = flow.window(0.0, 0.0).column
    np.testing.assert_allclose(win.w.reshape(-1, 5, 2, 3)[0, :, 0, 0], 1e-3 * s, rtol=1e-12)
    np.testing.assert_allclose(
        win.kz.reshape(-1, 5, 2, 3)[0, :, 1, 2], 0.01 * s * (1 - s), rtol=1e-12, atol=1e-18
    )
    assert "vertical velocity: from 'w' on 5 levels; K_z: from 'akt'" in flow.attrs["column"]
    bare, _ = sigma_file(tmp_path / "..", with_column_variables=False)
    line = open_flow(bare, column=True).attrs["column"]
    assert "vertical velocity: none in the file (no vertical advection); K_z: none" in line
    win = open_flow(bare, column=True).window(0.0, 0.0)
    inputs = mover.kernel_inputs(
        open_flow(bare), win, Transport(dt=10.0, dispersion=Dispersion(k1=0.0, k2=0.0))
    )
    with pytest.raises(InputError, match="the file has no vertical diffusivity"):
        mover.with_column(inputs, win.depth, 0.01, vertical.KZ_FILE, layers=win.column)


def test_z_levels_positive_down_on_a_staggered_grid_give_the_profile_at_each_point(tmp_path):
    """z levels given positive down (CF-1.8 §4.3.1), u on the x faces (Arakawa C), partial
    columns: each point's profile, a straight line in depth, is interpolated to four equal
    layers' centres; inside the column's points the line itself (1e-12), beyond them its end
    value (as numpy.interp); the bed at a face is the mean of its two cells' beds."""
    levels = np.array([0.5, 1.5, 3.0, 5.0])  # m below the surface
    total = np.array([[3.0, 6.0, 6.0], [3.0, 6.0, 1.2]])
    faces = np.array([-50.0, 50.0, 150.0, 250.0])
    u = np.broadcast_to((0.1 + 0.02 * levels)[None, :, None, None], (2, 4, 2, 4)).copy()
    v = np.broadcast_to((0.1 + 0.02 * levels)[None, :, None, None], (2, 4, 2, 3)).copy()
    v[np.broadcast_to(levels[None, :, None, None] > total[None, None] + 0.5, v.shape)] = np.nan
    p = lf.write_z_levels(tmp_path / "zc.nc", levels, u, v, total, geographic=False, u_faces=faces)
    flow = open_flow(p, column=True)
    col = flow.column
    assert col is not None
    target = (np.arange(4) + 0.5) / 4
    np.testing.assert_allclose(col.levels, target)
    got_u = flow.window(0.0, 0.0).column.u.reshape(4, 2, 4)
    h = 4.5  # the face between the 3 m and 6 m cells
    frac = (h - np.minimum(levels, h)) / h
    expect = np.interp(target, frac[::-1], (0.1 + 0.02 * levels)[::-1])
    np.testing.assert_allclose(got_u[:, 0, 1], expect, rtol=1e-12)
    unclipped = frac[levels < h]  # a level below the bed is held at the bed
    inside = (target > unclipped.min()) & (target < unclipped.max())
    assert inside.sum() == 3
    np.testing.assert_allclose(expect[inside], 0.1 + 0.02 * (1.0 - target[inside]) * h)
    got_v = flow.window(0.0, 0.0).column.v.reshape(4, 2, 3)
    h = 1.2  # the shallow cell: the 0.5 m level, and the 1.5 m one held at the bed
    expect = np.interp(target, [0.0, (h - 0.5) / h], [0.1 + 0.02 * 1.5, 0.1 + 0.02 * 0.5])
    np.testing.assert_allclose(got_v[:, 1, 2], expect, rtol=1e-12)
