"""Layered flow files depth-averaged on read: sigma, s and z coordinates, layer and band
selections, and the messages for layered files that cannot be read."""

from __future__ import annotations

import layered_files as lf
import numpy as np
import pytest
from scipy import integrate

from walkers.errors import InputError
from walkers.fields.netcdf.layers import VerticalCoordinate, layer_faces
from walkers.fields.netcdf.open import open_flow
from walkers.scenario.specs import LayerSelection

KAPPA = 0.41  # von Karman constant (common practice)
U_STAR = 0.05  # m s-1, friction velocity
Z0 = 0.002  # m, roughness length
# uneven sigma layers, surface first, thicker near the bed
SIGMA_BOUNDS = np.array([[-0.05, 0.0], [-0.2, -0.05], [-0.45, -0.2], [-1.0, -0.45]])


def _log_primitive(zeta: np.ndarray) -> np.ndarray:
    """∫_0^zeta ln(s / z0) ds = zeta ln(zeta / z0) - zeta (0 at zeta = 0)."""
    safe = np.where(zeta > 0, zeta, 1.0)
    return np.where(zeta > 0, zeta * np.log(safe / Z0) - zeta, 0.0)


def _log_layer_means(total: np.ndarray) -> np.ndarray:
    """Layer means (t, layer, y, x) of the log law u = (u*/κ) ln(ζ/z0), ζ the height above the bed,
    over the sigma layers of columns ``total`` m deep (t, y, x)."""
    lo = (1.0 + SIGMA_BOUNDS[:, 0])[None, :, None, None] * total[:, None]
    hi = (1.0 + SIGMA_BOUNDS[:, 1])[None, :, None, None] * total[:, None]
    return U_STAR / KAPPA * (_log_primitive(hi) - _log_primitive(lo)) / (hi - lo)


def _sigma_file(tmp_path, u, v, **kw):
    mid = SIGMA_BOUNDS.mean(axis=1)
    return lf.write_parametric(
        tmp_path / "sigma.nc",
        "ocean_sigma_coordinate",
        {"sigma": mid},
        u,
        v,
        bounds={"sigma": SIGMA_BOUNDS},
        **kw,
    )


def test_log_profile_depth_mean_matches_the_closed_form(tmp_path):
    # Log-law depth mean (u*/κ)(ln(H/z0) - 1): Fischer et al. 1979, Mixing in Inland and Coastal
    # Waters, ch. 2 (from memory); checked here also against scipy.integrate.quad.
    total = lf.BED_DEPTH[None] + lf.ETA
    u = _log_layer_means(total)
    flow = open_flow(_sigma_file(tmp_path, u, 0.5 * u))
    got = flow.window(lf.TIMES[0], lf.TIMES[-1])
    closed = U_STAR / KAPPA * (np.log(total / Z0) - 1.0)
    quad = np.vectorize(
        lambda h: integrate.quad(lambda z: U_STAR / KAPPA * np.log(z / Z0), 0.0, h)[0] / h
    )(total)
    np.testing.assert_allclose(closed, quad, rtol=1e-10)
    np.testing.assert_allclose(got.u, closed, rtol=1e-12)
    np.testing.assert_allclose(got.v, 0.5 * closed, rtol=1e-12)
    # the depth used for concentration is the total water depth, bed depth + surface elevation
    np.testing.assert_allclose(got.depth, total, rtol=1e-15)


def test_plain_layer_mean_of_log_profile_fails(tmp_path):
    # the twin: an unweighted mean of uneven layers misses the closed form by far more than the
    # 1e-12 tolerance above
    total = lf.BED_DEPTH[None] + lf.ETA
    plain = _log_layer_means(total).mean(axis=1)
    closed = U_STAR / KAPPA * (np.log(total / Z0) - 1.0)
    assert np.min(np.abs(plain / closed - 1.0)) > 0.05  # 6 to 7 % here


def test_sigma_faces_from_midpoints_give_the_same_mean_for_centred_layers(tmp_path):
    # layers centred between their faces: midpoints alone give the same faces as the bounds
    total = lf.BED_DEPTH[None] + lf.ETA
    u = _log_layer_means(total)
    with_bounds = open_flow(_sigma_file(tmp_path, u, u)).window(0.0, 0.0).u
    mids = SIGMA_BOUNDS.mean(axis=1)
    assert not np.allclose(0.5 * (mids[:-1] + mids[1:]), SIGMA_BOUNDS[:-1, 0])
    p = lf.write_parametric(tmp_path / "mid.nc", "ocean_sigma_coordinate", {"sigma": mids}, u, u)
    from_mids = open_flow(p).window(0.0, 0.0).u
    # uneven layers are not centred, so midpoints give other faces: the mean moves
    assert np.max(np.abs(from_mids / with_bounds - 1.0)) > 1e-3


def _vc(kind: str, faces: dict[str, float], depth_c: float = 0.0) -> VerticalCoordinate:
    one = {k: np.array([v]) for k, v in faces.items()}
    return VerticalCoordinate(kind, "layer", "layer", one, one, "test", {}, depth_c)


@pytest.mark.parametrize(
    ("kind", "faces", "depth_c", "expected"),
    [
        # z = eta + sigma (depth + eta) = 1 + (-0.5)(10 + 1)                     (by hand)
        ("ocean_sigma_coordinate", {"sigma": -0.5}, 0.0, -4.5),
        # S = 5(-0.5) + (20 - 5)(-0.8) = -14.5; z = S + eta (1 + S/depth)
        #   = -14.5 + 0.5 (1 - 14.5/20) = -14.3625                                 (by hand)
        ("ocean_s_coordinate_g1", {"s": -0.5, "C": -0.8}, 5.0, -14.3625),
        # S = (5(-0.5) + 20(-0.8)) / (5 + 20) = -0.74; z = eta + (eta + depth) S
        #   = 0.5 + 20.5 (-0.74) = -14.67                                          (by hand)
        ("ocean_s_coordinate_g2", {"s": -0.5, "C": -0.8}, 5.0, -14.67),
    ],
)
def test_parametric_heights_match_hand_values(kind, faces, depth_c, expected):
    # formulas: CF Conventions 1.8 (Eaton et al. 2020), Appendix D
    depth = 10.0 if kind == "ocean_sigma_coordinate" else 20.0
    eta = 1.0 if kind == "ocean_sigma_coordinate" else 0.5
    lower, upper = layer_faces(
        _vc(kind, faces, depth_c), np.full((1, 1, 1), eta), np.full((1, 1, 1), depth)
    )
    assert lower.shape == (1, 1, 1, 1)
    assert lower[0, 0, 0, 0] == pytest.approx(expected, abs=1e-12)
    # the twin: the g1 and g2 forms are not the same, so swapping them is caught
    if kind != "ocean_sigma_coordinate":
        other = "ocean_s_coordinate_g2" if kind.endswith("g1") else "ocean_s_coordinate_g1"
        wrong = layer_faces(
            _vc(other, faces, depth_c), np.full((1, 1, 1), eta), np.full((1, 1, 1), depth)
        )[0]
        assert abs(wrong[0, 0, 0, 0] - expected) > 0.1


def _s_heights(kind: str, s: np.ndarray, c: np.ndarray, depth_c: float) -> np.ndarray:
    """Heights (t, k, y, x) of s-coordinate faces, written out from CF-1.8 Appendix D."""
    eta, h = lf.ETA[:, None], lf.BED_DEPTH[None, None]
    s, c = s[None, :, None, None], c[None, :, None, None]
    if kind == "ocean_s_coordinate_g1":
        big_s = depth_c * s + (h - depth_c) * c
        return big_s + eta * (1.0 + big_s / h)
    big_s = (depth_c * s + h * c) / (depth_c + h)
    return eta + (eta + h) * big_s


@pytest.mark.parametrize("kind", ["ocean_s_coordinate_g1", "ocean_s_coordinate_g2"])
def test_s_coordinate_mean_of_a_linear_profile(tmp_path, kind):
    # u = a + b z: each layer's mean is the value at its mid-height, and the column mean the
    # value at mid-column, (eta - depth) / 2 (exact)
    s_b = np.array([[-0.3, 0.0], [-0.7, -0.3], [-1.0, -0.7]])
    c_b = np.array([[-0.1, 0.0], [-0.45, -0.1], [-1.0, -0.45]])
    lo, hi = (_s_heights(kind, s_b[:, i], c_b[:, i], 5.0) for i in (0, 1))
    a, b = 0.3, 0.02
    u = a + b * 0.5 * (lo + hi)
    p = lf.write_parametric(
        tmp_path / "s.nc",
        kind,
        {"s": s_b.mean(axis=1), "C": c_b.mean(axis=1)},
        u,
        -u,
        bounds={"s": s_b, "C": c_b},
    )
    flow = open_flow(p)
    got = flow.window(lf.TIMES[0], lf.TIMES[-1])
    expected = a + b * 0.5 * (lf.ETA - lf.BED_DEPTH[None])
    np.testing.assert_allclose(got.u, expected, rtol=1e-12)
    np.testing.assert_allclose(got.v, -expected, rtol=1e-12)
    assert "bounds 'layer_bnds'" in flow.attrs["vertical"]


LEVELS = np.array([0.5, 1.5, 3.0, 5.0])  # m below the surface (positive down)
TOTAL = np.array([[3.0, 6.0, 6.0], [3.0, 6.0, 1.2]])  # m


def _z_velocities() -> np.ndarray:
    """u (t, layer, y, x): 0.1, 0.2, 0.3, 0.4 m/s in layers 1-4, NaN below the bed."""
    u = np.broadcast_to(np.array([0.1, 0.2, 0.3, 0.4])[None, :, None, None], (2, 4, 2, 3)).copy()
    below = LEVELS[None, :, None, None] > TOTAL[None, None] + 0.5
    u[np.broadcast_to(below, u.shape)] = np.nan
    return u


def test_z_levels_lonlat_partial_columns(tmp_path):
    # faces half-way between the levels: 1.0, 2.25 and 4.0 m; the bed closes the lowest wet layer
    u = _z_velocities()
    p = lf.write_z_levels(tmp_path / "z.nc", LEVELS, u, 2 * u, TOTAL)
    flow = open_flow(p)
    assert flow.geographic
    got = flow.window(0.0, 0.0).u[0]
    deep = (1.0 * 0.1 + 1.25 * 0.2 + 1.75 * 0.3 + 2.0 * 0.4) / 6.0  # by hand
    three = (1.0 * 0.1 + 1.25 * 0.2 + 0.75 * 0.3) / 3.0  # by hand: layer 3 cut at the bed
    shallow = (1.0 * 0.1 + 0.2 * 0.2) / 1.2  # by hand
    np.testing.assert_allclose(got, [[three, deep, deep], [three, deep, shallow]], rtol=1e-12)
    assert "z levels 'layer', 4 layers, thicknesses from midpoints" in flow.attrs["vertical"]


def test_z_levels_height_positive_up_with_bounds(tmp_path):
    u = _z_velocities()
    heights = -LEVELS
    bounds = -np.array([[0.0, 1.0], [1.0, 2.0], [2.0, 4.0], [4.0, 8.0]])
    p = lf.write_z_levels(
        tmp_path / "zb.nc", heights, u, u, TOTAL, positive="up", bounds=bounds, geographic=False
    )
    got = open_flow(p).window(0.0, 0.0).u[0]
    deep = (1.0 * 0.1 + 1.0 * 0.2 + 2.0 * 0.3 + 2.0 * 0.4) / 6.0  # by hand
    assert got[0, 1] == pytest.approx(deep, rel=1e-12)
    assert got[1, 2] == pytest.approx((1.0 * 0.1 + 0.2 * 0.2) / 1.2, rel=1e-12)


def test_z_levels_on_a_staggered_grid_use_the_mean_bed_of_the_cells_around(tmp_path):
    # u on the x faces (Arakawa C): the bed at a face is the mean of the beds of its two cells
    faces = np.array([-50.0, 50.0, 150.0, 250.0])
    u = np.broadcast_to(np.array([0.1, 0.2, 0.3, 0.4])[None, :, None, None], (2, 4, 2, 4)).copy()
    p = lf.write_z_levels(
        tmp_path / "c.nc", LEVELS, u, _z_velocities(), TOTAL, geographic=False, u_faces=faces
    )
    got = open_flow(p).window(0.0, 0.0).u[0]
    # face between the 3 m and 6 m cells: bed at 4.5 m; layers 1, 1.25, 1.75 and 0.5 m thick
    assert got[0, 1] == pytest.approx((0.1 + 1.25 * 0.2 + 1.75 * 0.3 + 0.5 * 0.4) / 4.5, rel=1e-12)
    # the west edge face has one cell (3 m) beside it
    assert got[0, 0] == pytest.approx((0.1 + 1.25 * 0.2 + 0.75 * 0.3) / 3.0, rel=1e-12)


def test_band_and_single_layer(tmp_path):
    u = _z_velocities()
    p = lf.write_z_levels(tmp_path / "z.nc", LEVELS, u, u, TOTAL)
    band = open_flow(p, layers=LayerSelection("band", band=(0.0, 2.0))).window(0.0, 0.0).u[0]
    # top 2 m: 1 m of layer 1 and 1 m of layer 2; the 1.2 m column is all band
    assert band[0, 1] == pytest.approx((0.1 + 0.2) / 2.0, rel=1e-12)
    assert band[1, 2] == pytest.approx((1.0 * 0.1 + 0.2 * 0.2) / 1.2, rel=1e-12)
    deeper = open_flow(p, layers=LayerSelection("band", band=(2.0, 5.0))).window(0.0, 0.0).u[0]
    assert deeper[0, 1] == pytest.approx((0.25 * 0.2 + 1.75 * 0.3 + 1.0 * 0.4) / 3.0, rel=1e-12)
    # the 1.2 m column lies wholly above the band: its depth mean stands in
    assert deeper[1, 2] == pytest.approx((1.0 * 0.1 + 0.2 * 0.2) / 1.2, rel=1e-12)
    second = open_flow(p, layers=LayerSelection("layer", layer=2))
    assert second.window(0.0, 0.0).u[0][0, 1] == pytest.approx(0.2, rel=1e-12)
    assert "layer 2 from the surface" in second.attrs["vertical"]
    # layer 4 lies below the bed of the 3 m and 1.2 m columns
    with pytest.raises(
        InputError,
        match=r"flow\.layers\.layer = 4: variable 'u'.*z\.nc.*no value "
        r"in that layer at point x=10.*below the bed",
    ):
        open_flow(p, layers=LayerSelection("layer", layer=4))


# ---- bad input -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("attribute", "value", "message"),
    [
        (
            "formula_terms",
            "sigma: layer eta: ssh depth: h",
            r"sigma\.nc.*'layer'.*names variable 'ssh' for the term 'eta'.*no such variable",
        ),
        (
            "formula_terms",
            "sigma: layer depth: h",
            r"sigma\.nc.*lacks the term\(s\) eta.*Appendix D",
        ),
        (
            "standard_name",
            "ocean_double_sigma_coordinate",
            r"sigma\.nc.*variable 'u'.*unknown vertical coordinate 'layer'.*"
            r"ocean_double_sigma_coordinate.*Accepted",
        ),
        (
            "bounds",
            "sig_edges",
            r"sigma\.nc.*bounds of 'layer'.*'sig_edges'.*not in the file.*thicknesses cannot be "
            r"found",
        ),
    ],
)
def test_bad_vertical_coordinate_is_named(tmp_path, attribute, value, message):
    u = np.full((2, 4, 2, 3), 0.1)
    p = _sigma_file(
        tmp_path, u, u, edit=lambda ds: ds.variables["layer"].setncattr(attribute, value)
    )
    with pytest.raises(InputError, match=message):
        open_flow(p)


def test_layer_beyond_the_file(tmp_path):
    u = np.full((2, 4, 2, 3), 0.1)
    with pytest.raises(InputError, match=r"flow\.layers\.layer = 5.*4 layers.*from 1 \(top\) to 4"):
        open_flow(_sigma_file(tmp_path, u, u), layers=LayerSelection("layer", layer=5))


def test_band_asked_of_a_depth_averaged_file(tmp_path):
    import flowfiles as ff

    p = ff.write_flow(tmp_path / "flat.nc")
    with pytest.raises(InputError, match=r"flow\.layers.*band.*flat\.nc.*has no layers"):
        open_flow(p, layers=LayerSelection("band", band=(0.0, 2.0)))


# ---- the layered demo ------------------------------------------------------------------------


def test_layered_demo_gives_the_results_of_the_depth_averaged_demo():
    # The layered Saltmarsh Estuary file's thickness-weighted depth mean is the depth-averaged
    # flow (layer factors whose weighted mean is exactly 1), so the run on it reproduces the
    # depth-averaged demo's recorded results bit for bit (tests/data/demo_reference.json).
    import json
    import tomllib

    from test_bitwise_demo import PARTICLES, REFERENCE, SCENARIOS, describe

    from walkers import load_scenario, simulate_scenario

    raw = tomllib.loads((SCENARIOS / "saltmarsh_estuary_layered.toml").read_text("utf-8"))
    raw["releases"][0]["particles"] = PARTICLES
    result = simulate_scenario(load_scenario(raw, base_dir=SCENARIOS))
    now = describe(result)["variables"]
    reference = json.loads(REFERENCE.read_text(encoding="utf-8"))["variables"]
    assert sorted(now) == sorted(reference)
    assert [k for k in reference if now[k] != reference[k]] == []


def test_layered_demo_twin_with_plain_layer_mean_differs():
    # the twin: an unweighted mean of the demo's layer factors is not 1, so a reader that forgot
    # the thicknesses would move particles with velocities off by this factor
    import importlib.util

    from test_bitwise_demo import SCENARIOS

    spec = importlib.util.spec_from_file_location("mdf", SCENARIOS / "make_demo_flows.py")
    mdf = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mdf)
    factors = mdf.layer_factors()
    thickness = np.diff(np.asarray(mdf.ESTUARY_SIGMA_BOUNDS), axis=1).ravel()
    assert np.sum(thickness * factors) == 1.0
    assert abs(np.mean(factors) - 1.0) > 0.05


# ---- scenario keys ---------------------------------------------------------------------------


def _layered_scenario(layers: dict) -> dict:
    import tomllib

    from test_bitwise_demo import SCENARIOS

    raw = tomllib.loads((SCENARIOS / "saltmarsh_estuary_layered.toml").read_text("utf-8"))
    raw["flow"]["layers"] = layers
    return raw


def test_scenario_band_in_metres():
    from test_bitwise_demo import SCENARIOS

    from walkers import load_scenario

    raw = _layered_scenario({"select": "band", "band": ["0 m", "200 cm"]})
    spec = load_scenario(raw, base_dir=SCENARIOS).flow.layers
    assert spec == LayerSelection("band", band=(0.0, 2.0))
    raw = _layered_scenario({"select": "layer", "layer": 3})
    assert load_scenario(raw, base_dir=SCENARIOS).flow.layers == LayerSelection("layer", layer=3)
    assert load_scenario(_layered_scenario({}), base_dir=SCENARIOS).flow.layers == LayerSelection()


@pytest.mark.parametrize(
    ("layers", "message"),
    [
        ({"select": "band"}, r"flow\.layers\.band: select = \"band\" needs"),
        ({"select": "band", "band": ["2 m", "1 m"]}, r"flow\.layers\.band.*bottom must be deeper"),
        (
            {"select": "mean", "layer": 2},
            r"flow\.layers\.layer: applies only when select = 'layer'",
        ),
        ({"select": "top"}, r"flow\.layers\.select"),
        ({"select": "layer", "layer": 0}, r"flow\.layers\.layer"),
    ],
)
def test_scenario_layer_keys_bad_input(layers, message):
    from test_bitwise_demo import SCENARIOS

    from walkers import load_scenario

    with pytest.raises(InputError, match=message):
        load_scenario(_layered_scenario(layers), base_dir=SCENARIOS)


def test_inspect_names_the_layers(tmp_path):
    from walkers.inspect import describe_flow

    total = lf.BED_DEPTH[None] + lf.ETA
    u = _log_layer_means(total)
    text = describe_flow(_sigma_file(tmp_path, u, u))
    assert (
        "layers: ocean_sigma_coordinate 'layer', 4 layers, thicknesses from bounds 'layer_bnds'; "
        "reduced to one field by the thickness-weighted depth mean"
    ) in text
