"""Source attribution: the reversed flow, the posterior against closed forms, a synthetic case of
three candidate outfalls and two samples, and a clean sample ruling a candidate out.

Sources: the posterior of a log-normal measurement with a log-uniform prior is log-normal in the
mass (conjugate normal model in ln M; Gelman et al. 2013, Bayesian Data Analysis, 3rd ed., §2.5,
from memory), checked with scipy.stats.norm; the adjoint method of source attribution (Marchuk
1995; Keats, Yee & Lien 2007, Atmos. Environ. 41 — both from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import norm

from walkers.attribution.inference import (
    MASS_POINTS,
    Sensitivities,
    rank_candidates,
    window_mean,
)
from walkers.attribution.reverse import reversed_flow
from walkers.attribution.trace import trace
from walkers.errors import InputError
from walkers.fields.analytic import analytic_flow, grid_flow
from walkers.run.simulate import simulate
from walkers.scenario.config import Dispersion, OutputGrid, Receptor, Release, Transport
from walkers.scenario.sources import Candidate, Detection, ErrorModel

HOUR = 3600.0


# ---- the reversed flow ----------------------------------------------------------------------


def test_reversed_flow_puts_frames_in_backward_time_and_negates_velocity():
    x, y = np.linspace(0.0, 400.0, 5), np.linspace(0.0, 200.0, 3)
    times = np.array([0.0, 600.0, 1200.0, 1800.0])
    depth = np.stack([np.full((3, 5), 5.0 + k) for k in range(4)])
    flow = grid_flow(x, y, times, lambda xx, yy, t: (0.1 + t / 1e4 + 0 * xx, -0.2 + 0 * xx), depth)
    back = reversed_flow(flow, 1500.0)
    np.testing.assert_array_equal(back.times, [-300.0, 300.0, 900.0, 1500.0])
    # backward frame i is forward frame 3 - i, velocity negated, depth as it was
    np.testing.assert_array_equal(back.u.frames(1, 2), -flow.u.data[[2, 1]])
    np.testing.assert_array_equal(back.v.frames(0, 0), -flow.v.data[[3]])
    np.testing.assert_array_equal(back.depth.frames(0, 3), flow.depth.data[::-1])
    window = back.window(300.0, 900.0)
    np.testing.assert_array_equal(window.times, [300.0, 900.0])
    np.testing.assert_array_equal(window.u, -flow.u.data[[2, 1]])


def test_reversed_steady_flow_keeps_one_frame():
    flow = analytic_flow("uniform", u=0.3, v=-0.1, nx=5, ny=5)
    back = reversed_flow(flow, 7200.0)
    assert back.steady
    np.testing.assert_array_equal(back.u.frames(0, 9), -flow.u.data[:1])
    np.testing.assert_array_equal(back.depth.frames(0, 0), flow.depth.data[:1])


# ---- the posterior against a closed form ------------------------------------------------------


def one_place(influence: float, count: float) -> Sensitivities:
    return Sensitivities(
        influence=np.array([[[influence]]]),
        count=np.array([[[count]]]),
        bin_edges=np.array([[0.0, 1.0]]),
    )


MODEL = ErrorModel(sigma=0.4, mass_min=1e-3, mass_max=1e6, level=0.9)
DETECTION = Detection("sample", 0.0, 0.0, 10.0, 10.0, value=2e-6)
CANDIDATE = Candidate("outfall", 0.0, 0.0, 0.0, 1.0)


@pytest.mark.parametrize("count", [4.0, 1e6])
def test_mass_posterior_is_log_normal_with_measurement_and_sampling_error(count):
    s = 1e-8  # m-3: 2e-6 kg m-3 needs 200 kg
    ranking = rank_candidates([DETECTION], [CANDIDATE], one_place(s, count), MODEL)
    spread = np.sqrt(MODEL.sigma**2 + 1.0 / count)
    centre = np.log(DETECTION.value / s)
    expected = np.exp(centre + spread * norm.ppf([0.05, 0.5, 0.95]))
    got = [ranking.mass_lower[0], ranking.mass_median[0], ranking.mass_upper[0]]
    # bound: one step of the log-spaced mass grid
    step = np.log(MODEL.mass_max / MODEL.mass_min) / (MASS_POINTS - 1)
    np.testing.assert_allclose(np.log(got), np.log(expected), atol=step)
    assert ranking.mass_needed[0, 0] == pytest.approx(200.0)
    assert ranking.probability[0] == pytest.approx(1.0)


def test_mass_interval_without_the_sampling_error_is_too_narrow():
    # twin: with 4 particles behind the influence, leaving out 1/n misstates the interval
    ranking = rank_candidates([DETECTION], [CANDIDATE], one_place(1e-8, 4.0), MODEL)
    narrow = np.exp(np.log(200.0) + MODEL.sigma * norm.ppf(0.95))
    step = np.log(MODEL.mass_max / MODEL.mass_min) / (MASS_POINTS - 1)
    assert abs(np.log(ranking.mass_upper[0]) - np.log(narrow)) > 10 * step


def test_a_place_no_backward_particle_reached_cannot_explain_a_measured_sample():
    sens = Sensitivities(
        influence=np.array([[[0.0], [1e-8]]]),
        count=np.array([[[0.0], [400.0]]]),
        bin_edges=np.array([[0.0, 1.0], [0.0, 1.0]]),
    )
    ranking = rank_candidates([DETECTION], [CANDIDATE, CANDIDATE], sens, MODEL)
    np.testing.assert_allclose(ranking.probability, [0.0, 1.0])
    assert list(ranking.rank) == [2, 1]


def test_no_candidate_explaining_the_samples_gives_no_probabilities():
    ranking = rank_candidates([DETECTION], [CANDIDATE], one_place(0.0, 0.0), MODEL)
    assert not ranking.explained
    assert np.isnan(ranking.probability).all()


def test_window_mean_of_a_linear_series_is_its_midpoint_value():
    times = np.array([0.0, 10.0, 20.0])
    values = np.array([[0.0, 1.0, 2.0]])
    assert window_mean(times, values, 5.0, 15.0)[0] == pytest.approx(1.0)
    assert window_mean(times, values, 4.0, 4.0)[0] == pytest.approx(0.4)


# ---- a synthetic case: three outfalls, two samples -------------------------------------------

FLOW = analytic_flow(
    "uniform", x_range=(-6000, 6000), y_range=(-2000, 2000), nx=121, ny=41, u=0.25, depth=5.0
)
EDGES = {"west": "absorbing", "east": "absorbing", "south": "reflecting", "north": "reflecting"}
TRANSPORT = Transport(dt=60.0, dispersion=Dispersion(k1=5.0, k2=5.0), edges=EDGES)
GRID = OutputGrid(x0=-5950.0, dx=100.0, nx=120, y0=-1950.0, dy=100.0, ny=40)
OUTFALLS = {"north": 600.0, "middle": 0.0, "south": -600.0}
CANDIDATES = [Candidate(n, -4000.0, y, 0.0, 2 * HOUR, radius=100.0) for n, y in OUTFALLS.items()]
SAMPLES = {"S1": (-1000.0, -100.0), "S2": (-1000.0, 250.0), "clean": (-1000.0, -800.0)}
WINDOW = (4 * HOUR, 4.5 * HOUR)
TRUE_MASS = 100.0  # kg over two hours
TRACE_MODEL = ErrorModel(sigma=0.3, mass_min=1.0, mass_max=1e4, time_bins=2, level=0.9)


def measured(source: str) -> dict[str, float]:
    """Window-mean concentrations (kg m-3) at the samples from a forward run of the true source:
    TRUE_MASS over the source's window, spread over its circle."""
    c = next(c for c in CANDIDATES if c.name == source)
    release = Release(
        "circle", np.array([[c.x, c.y]]), 40_000, 0.0, 2 * HOUR, TRUE_MASS, radius=100.0
    )
    ds = simulate(
        FLOW,
        TRANSPORT,
        [release],
        start=0.0,
        end=6 * HOUR,
        output_interval=600.0,
        output_grid=GRID,
        receptors=[Receptor(n, *p, radius=100.0) for n, p in SAMPLES.items()],
        seed=5,
    )
    series = ds["receptor_concentration"].values
    t = ds["time"].values
    return {n: float(window_mean(t, series[k], *WINDOW)) for k, n in enumerate(SAMPLES)}


def attribute(detections):
    return trace(
        FLOW,
        TRANSPORT,
        detections,
        CANDIDATES,
        TRACE_MODEL,
        start=0.0,
        end=6 * HOUR,
        output_interval=600.0,
        output_grid=GRID,
        particles=20_000,
        seed=3,
    )


def sample(name, values, **kind):
    given = kind or {"value": values[name]}
    return Detection(name, *SAMPLES[name], *WINDOW, radius=100.0, **given)


@pytest.mark.parametrize("source", ["middle", "north"])
def test_three_outfalls_two_samples_recover_the_source_and_its_mass(source):
    values = measured(source)
    ds = attribute([sample("S1", values), sample("S2", values)])
    best = ds["candidate"].values[int(np.argmax(ds["probability"].values))]
    assert best == source  # the twin (north) shows the ranking follows the data
    row = ds.sel(candidate=source)
    assert float(row["probability"]) > 0.9
    assert float(row["mass_lower"]) <= TRUE_MASS <= float(row["mass_upper"])
    assert int(row["candidate_rank"]) == 1


def test_a_clean_sample_downstream_of_a_candidate_lowers_its_probability():
    values = measured("middle")
    limit = values["S1"] / 10.0
    one = attribute([sample("S1", values)])
    clean = attribute(
        [sample("S1", values), sample("clean", values, kind="absent", detection_limit=limit)]
    )
    present = attribute(
        [sample("S1", values), sample("clean", values, kind="present", detection_limit=limit)]
    )
    p_one = float(one["probability"].sel(candidate="south"))
    p_clean = float(clean["probability"].sel(candidate="south"))
    p_present = float(present["probability"].sel(candidate="south"))
    assert p_clean < 0.1 * p_one
    assert p_present > p_one  # twin: the same sample found positive raises it


# ---- checks at the door ---------------------------------------------------------------------


@pytest.mark.parametrize(
    "make,message",
    [
        (lambda: Detection("s", 0, 0, 10.0, 5.0, value=1.0), "ends before it starts"),
        (lambda: Detection("s", 0, 0, 0.0, 5.0), "needs a concentration > 0"),
        (lambda: Detection("s", 0, 0, 0.0, 5.0, kind="absent"), "needs a detection limit"),
        (lambda: Detection("s", 0, 0, 0.0, 5.0, kind="maybe"), "expected one of measured"),
        (lambda: Candidate("c", 0, 0, 5.0, 0.0), "ends before it starts"),
        (lambda: ErrorModel(sigma=0.0), "sigma"),
        (lambda: ErrorModel(mass_min=10.0, mass_max=1.0), "mass_min < mass_max"),
    ],
)
def test_bad_attribution_inputs_are_named(make, message):
    with pytest.raises(InputError, match=message):
        make()


def test_detections_outside_the_run_are_refused():
    late = Detection("late", -1000.0, 0.0, 7 * HOUR, 7 * HOUR, value=1e-6)
    with pytest.raises(InputError, match="detection 'late'.*outside the run"):
        attribute([late])


def test_candidates_that_all_start_after_the_samples_are_refused():
    late = [Candidate("late", -4000.0, 0.0, 5 * HOUR, 6 * HOUR)]
    early = Detection("S1", *SAMPLES["S1"], *WINDOW, value=1e-6)
    with pytest.raises(InputError, match="every candidate window starts at or after the end"):
        trace(
            FLOW,
            TRANSPORT,
            [early],
            late,
            TRACE_MODEL,
            start=0.0,
            end=6 * HOUR,
            output_interval=600.0,
            output_grid=GRID,
            particles=10,
        )
