"""Three-dimensional runs from a scenario (walkers.run.column and the [vertical] keys).

Run-level checks against published results, each with a twin that shows it can fail; the engine's
own checks of the vertical step are in tests/test_vertical.py. Tolerances are 5 standard errors
of the particle sample (stated beside each). The runs are small (a few thousand particles on an
analytic flow of a few cells) and use the option sets test_vertical.py compiles already.
"""

import math

import numba
import numpy as np
import pytest
import xarray as xr

from walkers.engine.state import ON_BED, ParticleState
from walkers.run import checkpoint, column
from walkers.run.population import make_population
from walkers.run.runner import simulate_scenario
from walkers.run.simulate import released_particles
from walkers.scenario.config import Vertical
from walkers.scenario.load import load_scenario

H = 4.0  # m, the depth of the analytic flows


def scenario(
    vertical=None,
    release=None,
    u=0.0,
    coefficient="1 m2/s",
    hours=6,
    particles=2000,
    half_life=None,
    interval="1 h",
    dt="60 s",
):
    """A scenario table: a uniform flow u (m/s) over a 40 km x 20 km basin of depth H, every edge
    reflecting, one instantaneous release of 1000 kg at (10 km, 10 km)."""
    rel = {
        "name": "r",
        "x": 10000.0,
        "y": 10000.0,
        "mass": "1000 kg",
        "particles": particles,
        **(release or {}),
    }
    table = {
        "run": {
            "start": "2026-01-01T00:00:00Z",
            "end": f"2026-01-01T{hours:02d}:00:00Z",
            "time_step": dt,
            "output_interval": interval,
            "seed": 7,
        },
        "flow": {
            "analytic": {
                "kind": "uniform",
                "extent": [0.0, 40000.0, 0.0, 20000.0],
                "cells": [8, 4],
                "depth": f"{H} m",
                "u": f"{u} m/s",
                "v": "0 m/s",
            }
        },
        "dispersion": {"coefficient": coefficient},
        "edges": dict.fromkeys(("west", "east", "south", "north"), "reflecting"),
        "releases": [rel],
    }
    table["output"] = {
        "grid": {
            "west": 0.0,
            "east": 40000.0,
            "south": 0.0,
            "north": 20000.0,
            "cell_size": 1000.0,
        }
    }
    if vertical is not None:
        table["vertical"] = vertical
    if half_life is not None:
        table["decay"] = {"half_life": half_life}
    return table


def budget_closure(ds):
    """released - (in water + out + decayed + held dry + on the bed), at every output time."""
    return ds.budget_released - (
        ds.budget_in_water
        + ds.budget_outflow.sum("edge")
        + ds.budget_decayed
        + ds.budget_held_dry
        + ds.budget_on_bed
    )


# ---------------------------------------------------------------------------------------------
# A neutral release in 3-D, averaged over the depth, is the depth-averaged release: centroid
# x0 + U t and variance 2 K t (Fischer et al. 1979, Mixing in Inland and Coastal Waters, ch. 2,
# from memory), and the depth-averaged run's numbers, within 5 standard errors.


@pytest.fixture(scope="module")
def neutral_runs():
    flat = simulate_scenario(load_scenario(scenario(u=0.2)))
    three = {
        "diffusivity": "constant",
        "coefficient": "0.01 m2/s",
        "bed": "reflecting",
    }
    deep = simulate_scenario(load_scenario(scenario(vertical=three, u=0.2)))
    wrong = simulate_scenario(
        load_scenario(scenario(vertical=three, u=0.2, coefficient="1.5 m2/s"))
    )
    return flat, deep, wrong


def moments_agree(a, b, n):
    """Whether the end centroids and variances of runs a and b (n particles each) agree within
    5 standard errors of their difference: SE(mean) = sqrt(var / n), SE(var) = var sqrt(2 / (n -
    1)) for a normal sample."""
    ok = True
    for axis in ("x", "y"):
        va, vb = float(a[f"variance_{axis}"][-1]), float(b[f"variance_{axis}"][-1])
        se_c = math.sqrt(va / n + vb / n)
        ok &= abs(float(a[f"centroid_{axis}"][-1]) - float(b[f"centroid_{axis}"][-1])) < 5 * se_c
        se_v = math.sqrt(2.0 / (n - 1)) * math.hypot(va, vb)
        ok &= abs(va - vb) < 5 * se_v
    return ok


def test_a_neutral_3d_release_averaged_over_depth_is_the_depth_averaged_release(neutral_runs):
    flat, deep, wrong = neutral_runs
    n, t, k, u = 2000, 6 * 3600.0, 1.0, 0.2
    assert deep.attrs["vertical"].startswith("constant K_z = 0.01 m2/s; reflecting bed")
    assert "budget_on_bed" in deep and "budget_on_bed" not in flat
    assert float(deep.budget_on_bed[-1]) == 0.0
    assert moments_agree(deep, flat, n)
    # and both against the analytic moments: SE(mean) = sqrt(2Kt / n), SE(var) = 2Kt sqrt(2/(n-1))
    var = 2.0 * k * t
    for ds in (flat, deep):
        assert abs(float(ds.centroid_x[-1]) - (10000.0 + u * t)) < 5 * math.sqrt(var / n)
        assert abs(float(ds.centroid_y[-1]) - 10000.0) < 5 * math.sqrt(var / n)
        for axis in ("x", "y"):
            assert abs(float(ds[f"variance_{axis}"][-1]) - var) < 5 * var * math.sqrt(2 / (n - 1))
    # the twin: a 3-D run with a horizontal K 1.5 times too large is told apart
    assert not moments_agree(wrong, flat, n)


# ---------------------------------------------------------------------------------------------
# A depositing bed under a well-mixed column: dM/dt = -w_d M / h, so the fraction on the bed is
# 1 - exp(-w_d t / h) (the first-order law of a well-mixed column with a deposition flux w_d C at
# the bed; Krone 1962 / common practice, from memory), within 5 binomial standard errors
# sqrt(p (1 - p) / n) at every output time. Well mixed: w_d h / K_z = 0.004 << 1.

WD, KZ = 2e-4, 0.1  # m/s, m2/s


@pytest.fixture(scope="module")
def deposition_run():
    vertical = {
        "diffusivity": "constant",
        "coefficient": f"{KZ} m2/s",
        "bed": "depositing",
        "deposition_velocity": f"{WD * 1e3} mm/s",
    }
    sc = load_scenario(scenario(vertical=vertical, coefficient="0 m2/s", particles=4000, dt="10 s"))
    return simulate_scenario(sc)


def fraction_law_holds(ds, wd, h, n):
    t = ds.time.values - ds.time.values[0]  # s (the result's times are seconds since the start)
    assert ds.time.attrs["units"].startswith("seconds since")
    p = -np.expm1(-wd * t / h)
    seen = ds.budget_on_bed.values / ds.budget_released.values
    se = np.sqrt(np.maximum(p * (1.0 - p), 1e-12) / n)
    return bool(np.all(np.abs(seen - p) <= 5 * se + 1e-12))


def test_a_depositing_bed_follows_the_first_order_law_and_the_budget_stays_exact(deposition_run):
    ds = deposition_run
    assert float(ds.budget_on_bed[-1]) > 0.5 * float(ds.budget_released[-1])  # ~ 0.66 by 6 h
    assert fraction_law_holds(ds, WD, H, 4000)
    # the twin: the law with the deposition velocity off by a quarter is refused by the same run
    assert not fraction_law_holds(ds, 1.25 * WD, H, 4000)
    # exact: released = in water + out + decayed + held dry + on the bed, to round-off
    assert np.all(np.abs(budget_closure(ds).values) <= 1e-12 * 1000.0)


def deposit_outputs(ds, folder):
    """The deposit outputs of result ``ds``: (variable written, deposit.png drawn, deposit
    GeoTIFF exported), through the writer, the figures and ``walkers export``."""
    from click.testing import CliRunner
    from pyproj import CRS

    from walkers.cli import main
    from walkers.outputs.figures import _load
    from walkers.outputs.figures_column import column_figures
    from walkers.outputs.writer import write_results

    folder.mkdir()
    ds = ds.copy()
    ds.attrs["crs_wkt"] = CRS.from_epsg(32631).to_wkt()  # the analytic basin, placed on a map
    path = write_results(ds, folder / "run.nc")
    figures = [p.name for p in column_figures(_load(path, None, None), folder)]
    out = CliRunner().invoke(main, ["export", str(path)])
    assert out.exit_code == 0, out.output
    with xr.open_dataset(path) as written:
        has_variable = "deposit" in written
    return has_variable, "deposit.png" in figures, (folder / "run_deposit.tif").is_file()


def test_only_a_depositing_bed_writes_the_deposit_its_map_and_its_geotiff(
    neutral_runs, deposition_run, tmp_path
):
    pytest.importorskip("rasterio")
    _, reflecting, _ = neutral_runs
    # a reflecting bed keeps nothing: no all-zero deposit, no empty map, no empty GeoTIFF ...
    assert float(np.abs(reflecting.budget_on_bed).max()) == 0.0
    assert deposit_outputs(reflecting, tmp_path / "reflecting") == (False, False, False)
    assert "concentration_in_band" in reflecting  # ... though it is a three-dimensional result
    # a depositing bed writes all three, and the deposit is the mass on the bed (the output grid
    # covers the basin; cells of 1000 m x 1000 m)
    assert deposit_outputs(deposition_run, tmp_path / "depositing") == (True, True, True)
    on_grid = deposition_run.deposit.sum(("y", "x")).values * 1e6
    np.testing.assert_allclose(on_grid, deposition_run.budget_on_bed.values, rtol=1e-12)
    assert float(on_grid[-1]) > 0.0


# ---------------------------------------------------------------------------------------------
# Resume and threads: the same bits


SETTLING = {
    "behaviour": "settling",
    "settling_velocities": ["0.1 mm/s", "1 mm/s"],
    "fractions": [0.5, 0.5],
    "start_height": "above_bed",
    "height_above_bed": "1 m",
}
PARABOLIC = {
    "diffusivity": "parabolic",
    "drag_coefficient": 0.0025,
    "bed": "depositing",
    "deposition_velocity": "0.5 mm/s",
}


def settling_scenario():
    return load_scenario(
        scenario(
            vertical=PARABOLIC,
            release=SETTLING,
            u=0.3,
            particles=600,
            hours=4,
            half_life="1 d",
            interval="30 min",
        )
    )


def test_a_resumed_3d_run_gives_the_same_bits(tmp_path):
    sc = settling_scenario()
    whole = simulate_scenario(sc)
    assert float(whole.budget_on_bed[-1]) > 0.0
    assert np.all(np.abs(budget_closure(whole).values) <= 1e-12 * 1000.0)
    path = tmp_path / "run.checkpoint.npz"
    fingerprint = checkpoint.run_fingerprint(sc, "fast")

    def stop_at_four(state):
        if state.next_output == 4:
            checkpoint.save_checkpoint(path, state, fingerprint)
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        simulate_scenario(sc, on_output=stop_at_four)
    state = checkpoint.load_checkpoint(path, fingerprint)
    assert state.particles.sigma is not None and state.particles.settling is not None
    assert set(np.unique(state.particles.settling)) == {1e-4, 1e-3}
    assert np.any(state.particles.status == ON_BED)
    resumed = simulate_scenario(sc, resume=state)
    for name in whole.data_vars:
        assert np.array_equal(whole[name].values, resumed[name].values, equal_nan=True), name


def test_a_3d_run_gives_the_same_bits_on_one_and_two_threads():
    sc = settling_scenario()
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = simulate_scenario(sc)
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        two = simulate_scenario(sc)
    finally:
        numba.set_num_threads(before)
    for name in one.data_vars:
        assert np.array_equal(one[name].values, two[name].values, equal_nan=True), name


# ---------------------------------------------------------------------------------------------
# Placement in the column, ensembles


def test_particles_start_where_their_release_says_with_the_settling_mix():
    from walkers.engine.dispersion import transport_for
    from walkers.fields.scenario_flow import build_flow

    sc = load_scenario(
        scenario(
            vertical=PARABOLIC,
            release={**SETTLING, "fractions": [0.25, 0.75]},
            particles=4000,
        )
    )
    flow = build_flow(sc.flow)
    tr = transport_for(sc, flow)
    p, owner = released_particles(sc.releases, flow, np.random.default_rng(1), tr)
    assert np.allclose(p.sigma, 1.0 / H)  # 1 m above the bed of a 4 m column
    # a binomial share of 1 mm/s grains: 0.75 within 5 SE sqrt(0.75 * 0.25 / n)
    share = np.mean(p.settling == 1e-3)
    assert abs(share - 0.75) < 5 * math.sqrt(0.75 * 0.25 / 4000)
    assert set(np.unique(p.settling)) == {1e-4, 1e-3}
    # the horizontal places are those of the depth-averaged run (the column draws come after)
    flat, _ = released_particles(sc.releases, flow, np.random.default_rng(1))
    assert np.array_equal(flat.x, p.x) and np.array_equal(flat.y, p.y)
    # an ensemble population carries each member's heights and settling velocities
    pop = make_population([sc.releases, sc.releases], [1.0, 2.0], [0, 1], 5, flow, tr)
    from walkers.engine.randomness import run_streams

    alone, _ = released_particles(sc.releases, flow, run_streams(5, 1)[1], tr)
    member = pop.member(pop.particles, 1)
    assert np.array_equal(member.sigma, alone.sigma)
    assert np.array_equal(member.settling, alone.settling)


def test_a_rising_release_gathers_at_the_surface():
    """Rising at 5 mm/s against a parabolic K_z of u* = 0.015 m/s: the Rouse number
    w / (κ u*) = -0.8 puts most of the mass in the upper half (Rouse 1937, from memory); the twin
    (neutral) stays spread evenly."""
    from walkers.engine.dispersion import transport_for
    from walkers.fields.scenario_flow import build_flow
    from walkers.run.simulate import simulate

    heights = {}
    for behaviour in ("rising", "neutral"):
        rel = {"behaviour": behaviour, "start_height": "bed"}
        if behaviour == "rising":
            rel["rise_velocity"] = "5 mm/s"
        sc = load_scenario(
            scenario(
                vertical={"diffusivity": "parabolic", "drag_coefficient": 0.0025},
                release=rel,
                u=0.3,
                particles=600,
                hours=2,
            )
        )
        flow = build_flow(sc.flow)
        kept = {}

        def keep(state, kept=kept):
            kept["sigma"] = state.particles.sigma.copy()

        simulate(
            flow,
            transport_for(sc, flow),
            sc.releases,
            start=0.0,
            end=sc.duration,
            output_interval=sc.output_interval,
            output_grid=sc.output,
            seed=sc.seed,
            on_output=keep,
        )
        heights[behaviour] = kept["sigma"]
    upper = {b: float(np.mean(s > 0.5)) for b, s in heights.items()}
    se = math.sqrt(0.25 / 600)
    assert upper["rising"] > 0.5 + 5 * se, upper
    assert abs(upper["neutral"] - 0.5) < 5 * se, upper


@pytest.mark.parametrize("walk_member", [3, 4])
def test_a_3d_population_of_one_member_is_bitwise_its_own_run(walk_member):
    """Member 3 moved as a population (heights and settling velocities per particle) gives the
    bits of its own run with the same walk key; the twin (member 4's walk key) does not."""
    from walkers.engine.dispersion import transport_for
    from walkers.engine.randomness import run_streams
    from walkers.fields.scenario_flow import build_flow
    from walkers.run.population import simulate_population
    from walkers.run.simulate import simulate

    sc = settling_scenario()
    flow = build_flow(sc.flow)
    tr = transport_for(sc, flow)
    run = {"start": 0.0, "end": sc.duration, "output_interval": sc.output_interval}
    own = simulate(flow, tr, sc.releases, output_grid=sc.output, seed=sc.seed, member=3, **run)
    pop = make_population([sc.releases], [1.0], [3], sc.seed, flow, tr)
    nt = own.sizes["time"]
    conc = np.zeros((nt, sc.output.ny, sc.output.nx))
    on_bed = np.zeros(nt)

    def keep(k, b, c, values, budget):
        conc[k], on_bed[k] = c, budget["budget_on_bed"]

    simulate_population(
        flow,
        tr,
        pop,
        keep,
        output_grid=sc.output,
        receptors=(),
        walk_key=run_streams(sc.seed, walk_member)[0],
        **run,
    )
    same = np.array_equal(conc, own.concentration.values) and np.array_equal(
        on_bed, own.budget_on_bed.values
    )
    assert same == (walk_member == 3)
    assert on_bed[-1] > 0.0


def test_shear_velocity_on_a_curvilinear_grid_is_that_of_the_physical_speed():
    """A rotated, stretched grid carrying a uniform 0.5 m/s current: u* on every cell is
    sqrt(C_d) |U| = 0.025 m/s (coefficients.shear_velocity, common practice), whatever the
    index-space components; the twin (the index-space speed taken as the speed) is not."""
    from walkers.fields.analytic import curvilinear_flow

    a, b = np.meshgrid(np.arange(6.0) * 150.0, np.arange(5.0) * 80.0)
    ang = math.radians(30.0)
    cx, cy = a * math.cos(ang) - b * math.sin(ang), a * math.sin(ang) + b * math.cos(ang)
    flow = curvilinear_flow(cx, cy, [0.0], lambda X, Y, t: (0.3 + 0 * X, 0.4 + 0 * Y), depth=5.0)
    vertical = Vertical(drag_coefficient=0.0025)
    window = flow.window(0.0, 0.0)
    ustar = column.cell_shear_velocity(flow, window, vertical)
    assert np.allclose(ustar, 0.05 * 0.5, rtol=1e-12)
    index_speed = np.hypot(window.u[0], window.v[0])
    assert not np.allclose(0.05 * index_speed, 0.05 * 0.5, rtol=1e-3)


def test_a_start_height_above_the_bed_is_a_fraction_of_the_depth_at_release():
    """Depth 2, 4 and 8 m in frames at 0, 1 h and 2 h: particles released 1 m above the bed at
    1000 s, 2000 s and 6000 s take the nearest frame's depth (sigma 1/2, 1/4, 1/8); one 3 m above
    the bed in 2 m of water starts at the surface."""
    from walkers.fields.analytic import grid_flow
    from walkers.scenario.config import Release

    xc = np.array([0.0, 100.0, 200.0])
    depth = np.array([2.0, 4.0, 8.0])[:, None, None] * np.ones((3, 3, 3))
    flow = grid_flow(xc, xc, [0.0, 3600.0, 7200.0], lambda X, Y, t: (0 * X, 0 * Y), depth=depth)
    rel = [
        Release(
            "point", np.array([[100.0, 100.0]]), 4, start_height="above_bed", height_above_bed=h
        )
        for h in (1.0, 3.0)
    ]
    p = ParticleState.from_arrays(
        np.full(4, 100.0), np.full(4, 100.0), np.ones(4), np.array([1000.0, 2000.0, 6000.0, 0.0])
    )
    column.place_in_columns(p, np.array([0, 0, 0, 1]), rel, flow, np.random.default_rng(0))
    assert np.array_equal(p.sigma, [0.5, 0.25, 0.125, 1.0])
    assert np.array_equal(p.settling, np.zeros(4))


def test_a_3d_ensemble_runs_and_its_summary_says_so():
    """Four members of the settling release moved as one population in 3-D: the ensemble's
    summary names K_z, the bed and the behaviour; a depth-averaged ensemble's does not."""
    from walkers.ensemble.assemble import summary_text
    from walkers.ensemble.execute import run_ensemble

    text = {}
    for name, vertical in (("deep", PARABOLIC), ("flat", None)):
        t = scenario(vertical=vertical, release=SETTLING if vertical else None, u=0.3)
        t["releases"][0]["particles"] = 300
        t["run"]["end"] = "2026-01-01T02:00:00Z"
        t["ensemble"] = {"members": 4, "location_sd": "100 m"}
        text[name] = summary_text(run_ensemble(t))
    assert "Three-dimensional: parabolic K_z" in text["deep"]
    assert "r: settling (50 % at 0.1 mm/s, 50 % at 1 mm/s), from 1 m above the bed" in text["deep"]
    assert "Three-dimensional" not in text["flat"]


def test_a_3d_particle_is_counted_with_its_height_and_settling_velocity_in_memory():
    """The memory check counts the two float64 a particle gains in 3-D (sigma, settling):
    ParticleState.nbytes grows by exactly that."""
    from walkers.fields.scenario_flow import build_flow
    from walkers.run.runner import COLUMN_BYTES, memory_estimate

    deep, flat = settling_scenario(), load_scenario(scenario())
    flow = build_flow(flat.flow)
    assert memory_estimate(deep, flow)[0] - memory_estimate(flat, flow)[0] == COLUMN_BYTES
    p = ParticleState.from_arrays(np.zeros(5), np.zeros(5), np.ones(5), np.zeros(5))
    before = p.nbytes
    assert p.in_column(0.5, 1e-4).nbytes - before == 5 * COLUMN_BYTES
