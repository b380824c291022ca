"""The benchmark runs in quick mode and reports every figure (speed itself is never asserted)."""

import json

import numpy as np
import pytest

from walkers import bench, bench_report, scaling
from walkers.engine import mover

FIELDS = {
    "compiled_steps_per_s_1thread",
    "compiled_steps_per_cpu_s_1thread",
    "compiled_steps_per_s_2threads",
    "numpy_steps_per_s",
    "compiled_over_numpy",
    "speedup_1_to_2_threads",
    "compiled_minus_numpy_max_m",
    "bytes_per_particle",
    "peak_memory_10m_bytes",
    "peak_memory_method",
    "gridding_particles_per_s",
    "concentration_particles_per_s",
    "first_step_warm_s",
    "scenario_steps_per_s_1thread",
    "scenario_steps_per_cpu_s_1thread",
    "scenario_steps_per_s_2threads",
    "scenario_over_reference",
    "scenario_speedup_1_to_2_threads",
    "rk4_over_euler_cost",
    "scenario_compiled_minus_numpy_max_m",
    "scenario_workload",
    "machine",
    "workload",
    "caution",
}


@pytest.fixture(scope="module")
def small_result():
    return bench.run_benchmark(
        quick=True, particles=2000, repeats=1, steps=4, memory_particles=50_000
    )


def test_quick_benchmark_reports_every_field(small_result):
    r = small_result
    assert FIELDS <= set(r)
    texts = {"machine", "workload", "scenario_workload", "caution", "peak_memory_method"}
    for key in FIELDS - texts:
        assert np.isfinite(r[key]) and r[key] >= 0, key
    assert r["peak_memory_method"].startswith("projected from 50,000")
    assert r["workload"]["grid_cells"] == [200, 100] and r["workload"]["frames"] >= 3
    assert r["machine"]["nproc"] >= 1 and r["machine"]["cpu_model"]
    json.dumps(r)  # plain numbers and strings only


def test_benchmark_state_is_the_particle_state(small_result):
    """Positions, masses, times and status: 6 float64 and one int8 per particle."""
    assert small_result["bytes_per_particle"] == 6 * 8 + 1


def test_benchmark_engines_agree_on_the_same_particles(small_result):
    """The compiled fast path and the numpy twin move the benchmark's particles alike (DESIGN.md
    §4.7: 1e-12 of the 4 km basin)."""
    assert small_result["compiled_minus_numpy_max_m"] <= 1e-12 * 4000.0
    assert small_result["scenario_compiled_minus_numpy_max_m"] <= 1e-12 * 4000.0


def test_scenario_workload_takes_the_general_step():
    """The scenario workload leaves the fast path on every option the estuary demo uses: gridded
    flow-aligned K with the drift term, flats that dry as the tide falls, decay, the bridge test
    at absorbing edges; some of its particles start on the flats and strand."""
    flow, transport = bench.scenario_workload()
    inputs = mover.kernel_inputs(flow, flow.window(0.0, float(flow.times[-1])), transport)
    ndim, scheme, aligned, drift, bridge = inputs.opts[:5]
    assert (ndim, scheme, aligned, drift, bridge) == (2, 0, 1, 1, 1)
    assert inputs.disp[4][0] < 0.0  # K on the grid
    assert transport.decay_rate > 0.0 and "absorbing" in transport.edges.values()
    dry = 1.0 - flow.wet.data.mean(axis=(1, 2))
    assert dry[-1] > dry[0] > 1.0 - bench.reference_workload()[0].wet.data[0].mean()
    state = bench.initial_state(2000, flow)
    mover.advance(state, inputs, 0.0, bench.DT, 2, 0, bench.KEY)
    assert 0 < np.count_nonzero(state.status == 2) < 1000


def test_reference_workload_has_land_walls_and_open_edges():
    flow, transport = bench.reference_workload()
    assert flow.x.size * flow.y.size >= 200 * 100 and flow.times.size >= 3
    assert 0.0 < 1.0 - flow.wet.data[0].mean() < 0.5
    assert set(transport.edges.values()) == {"reflecting", "absorbing"}
    inputs = mover.kernel_inputs(flow, flow.window(0.0, float(flow.times[-1])), transport)
    assert inputs.flow[2].shape[0] == flow.times.size  # time-varying frames


def test_benchmark_engines_can_disagree():
    """Twin of the agreement check: different random keys give metres of difference."""
    flow, transport = bench.reference_workload()
    inputs = mover.kernel_inputs(flow, flow.window(0.0, float(flow.times[-1])), transport)
    a = bench.initial_state(500, flow)
    b = a.copy()
    mover.advance(a, inputs, 0.0, bench.DT, 3, 0, bench.KEY)
    mover.advance(b, inputs, 0.0, bench.DT, 3, 0, bench.KEY + 1, stepper="reference")
    assert np.max(np.abs(a.x - b.x)) > 1.0


def test_text_report_names_each_target(small_result):
    text = bench_report.format_report(small_result)
    for word in ("particle-steps/s", "threads", "bytes", "GB", "gridding", "first step"):
        assert word in text
    assert small_result["caution"] in text


def test_scaling_slope_of_a_power_law():
    assert scaling.fit_slope([1.0, 2.0, 4.0], [3.0, 6.0, 12.0]) == pytest.approx(1.0)


def test_cli_bench_command_prints_json():
    from click.testing import CliRunner

    from walkers.cli import main

    if "bench" not in main.commands:
        pytest.skip("the bench command is not in walkers.cli yet")
    result = CliRunner().invoke(
        main, ["bench", "--quick", "--json", "--particles", "1000", "--repeats", "1"]
    )
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert FIELDS <= set(data)


def test_compute_only_loop_is_the_splitmix64_chain():
    """The machine check's loop computes what it says: its first round is SplitMix64's first
    output from state 0, 0xe220a8397b1dcdaf (Steele, Lea & Flood 2014, "Fast splittable
    pseudorandom number generators", OOPSLA; the value of the reference implementation, from
    memory), and later rounds follow the numpy twin's mix64 (a chain one round short differs)."""
    from walkers.engine import kernels, twin

    assert int(kernels.hash_chain(0, 1)) == 0xE220A8397B1DCDAF
    z = np.array([7], dtype=np.uint64)
    for _ in range(5):
        z = twin.mix64(z + np.uint64(0x9E3779B97F4A7C15))
    assert int(kernels.hash_chain(7, 5)) == int(z[0])
    assert int(kernels.hash_chain(7, 4)) != int(z[0])


def test_machine_check_reports_a_second_core(small_result):
    """The compute-only speed-up is reported beside the load (it bounds the 1 -> 2 threads
    figures): a ratio between the one-thread and the two-thread throughput, 0 < s <= 2.2."""
    s = small_result["machine"]["compute_only_1_to_2_threads"]
    assert 0.0 < s <= 2.2
