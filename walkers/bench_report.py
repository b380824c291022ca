"""The text report of ``walkers bench``: each figure of :func:`walkers.bench.run_benchmark`
beside its target."""

from __future__ import annotations

#: The benchmark's targets: key of the result -> (comparison, value), SI units and ratios.
TARGETS = {
    "compiled_steps_per_s_1thread": (">=", 40e6),
    "compiled_over_numpy": (">=", 8.0),
    "speedup_1_to_2_threads": (">=", 1.8),
    "scenario_steps_per_s_1thread": (">=", 15e6),
    "scenario_over_reference": (">=", 0.6),
    "curvilinear_over_reference": (">=", 1.0 / 1.5),
    "mesh_over_reference": (">=", 1.0 / 3.0),
    "threed_over_reference": (">=", 0.5),
    "rk4_over_euler_cost": ("<=", 2.5),
    "scenario_speedup_1_to_2_threads": (">=", 1.8),
    "bytes_per_particle": ("<=", 64),
    "peak_memory_10m_bytes": ("<=", 1.5e9),
    "gridding_particles_per_s": (">=", 100e6),
    "first_step_warm_s": ("<=", 3.0),
}


def format_report(r: dict) -> str:
    """The benchmark result as a short text report, each figure beside its target."""
    w = r["workload"]
    m = r["machine"]

    def mark(key):
        op, value = TARGETS[key]
        ok = r[key] >= value if op == ">=" else r[key] <= value
        return f"(target {op} {value:g}: {'met' if ok else 'NOT met'})"

    lines = [
        f"walkers {r['walkers_version']} benchmark — {m['cpu_model']}, {m['nproc']} CPUs, "
        f"load average {m['load_average_before'][0]:.2f} -> {m['load_average_after'][0]:.2f}; "
        f"a compute-only loop ran {m['compute_only_1_to_2_threads']:.2f} x faster on "
        f"{r['threads_used_for_2']} threads than on 1 (the most a second thread can give now)",
        f"workload: {w['grid_cells'][0]} x {w['grid_cells'][1]} cells, {w['frames']} frames, "
        f"{w['particles']:,} particles, {w['steps_compiled']} steps of {w['dt_s']:g} s "
        f"(twin {w['steps_twin']}), medians of {w['repeats']}; ratios X / reference: medians of "
        f"{r['ratio_pairs']} back-to-back pairs, as is 1 -> 2 threads",
        f"compiled, 1 thread    {r['compiled_steps_per_s_1thread'] / 1e6:8.1f} M particle-steps/s "
        f"{mark('compiled_steps_per_s_1thread')}; "
        f"{r['compiled_steps_per_cpu_s_1thread'] / 1e6:.1f} M per CPU-second",
        f"compiled, {r['threads_used_for_2']} threads   "
        f"{r['compiled_steps_per_s_2threads'] / 1e6:8.1f} M particle-steps/s",
        f"numpy twin            {r['numpy_steps_per_s'] / 1e6:8.2f} M particle-steps/s",
        f"compiled / numpy      {r['compiled_over_numpy']:8.1f} x {mark('compiled_over_numpy')}",
        f"1 -> 2 threads        {r['speedup_1_to_2_threads']:8.2f} x "
        f"{mark('speedup_1_to_2_threads')}",
        f"compiled vs twin      {r['compiled_minus_numpy_max_m']:8.1e} m largest difference",
        "scenario workload (the estuary demo's options: estimated flow-aligned K on the grid, "
        "drift, drying flats, decay, bridge test):",
        f"compiled, 1 thread    {r['scenario_steps_per_s_1thread'] / 1e6:8.1f} M particle-steps/s "
        f"{mark('scenario_steps_per_s_1thread')}; "
        f"{r['scenario_steps_per_cpu_s_1thread'] / 1e6:.1f} M per CPU-second",
        f"scenario / reference  {r['scenario_over_reference']:8.2f} "
        f"{mark('scenario_over_reference')}; {r['scenario_over_reference_cpu']:.2f} per CPU-s",
        f"RK4 / Euler cost      {r['rk4_over_euler_cost']:8.2f} {mark('rk4_over_euler_cost')}; "
        f"{r['rk4_over_euler_cost_cpu']:.2f} per CPU-s",
        f"compiled, {r['threads_used_for_2']} threads   "
        f"{r['scenario_steps_per_s_2threads'] / 1e6:8.1f} M particle-steps/s",
        f"1 -> 2 threads        {r['scenario_speedup_1_to_2_threads']:8.2f} x "
        f"{mark('scenario_speedup_1_to_2_threads')}",
        f"compiled vs twin      {r['scenario_compiled_minus_numpy_max_m']:8.1e} m largest "
        "difference",
        "curvilinear workload (the reference basin on a rotated, bent curvilinear grid, stepped "
        "in index space with the full tensor K and the metric drift):",
        f"compiled, 1 thread    {r['curvilinear_steps_per_s_1thread'] / 1e6:8.1f} M "
        f"particle-steps/s; {r['curvilinear_steps_per_cpu_s_1thread'] / 1e6:.1f} M per CPU-second",
        f"curvilinear / ref.    {r['curvilinear_over_reference']:8.2f} "
        f"{mark('curvilinear_over_reference')}; {r['curvilinear_over_reference_cpu']:.2f} per "
        "CPU-s",
        f"curvilinear / the reference with K on the grid (the same step options on a "
        f"rectilinear grid, {r['gridded_steps_per_s_1thread'] / 1e6:.1f} M/s) "
        f"{r['curvilinear_over_gridded']:.2f}; {r['curvilinear_over_gridded_cpu']:.2f} per CPU-s",
        f"compiled, {r['threads_used_for_2']} threads   "
        f"{r['curvilinear_steps_per_s_2threads'] / 1e6:8.1f} M particle-steps/s",
        f"compiled vs twin      {r['curvilinear_compiled_minus_numpy_max_cells']:8.1e} cells "
        "largest difference",
        "mesh workload (the reference basin cut into 40 000 triangles, velocities on the nodes, "
        "the east and north sides open boundaries):",
        f"compiled, 1 thread    {r['mesh_steps_per_s_1thread'] / 1e6:8.1f} M particle-steps/s; "
        f"{r['mesh_steps_per_cpu_s_1thread'] / 1e6:.1f} M per CPU-second",
        f"mesh / reference      {r['mesh_over_reference']:8.2f} {mark('mesh_over_reference')}; "
        f"{r['mesh_over_reference_cpu']:.2f} per CPU-s",
        f"3-D / reference       {r['threed_over_reference']:8.2f} {mark('threed_over_reference')}; "
        f"{r['threed_over_reference_cpu']:.2f} per CPU-s (parabolic K_z in Visser substeps)",
        f"state per particle    {r['bytes_per_particle']:8d} bytes {mark('bytes_per_particle')}",
        f"peak, 10 M particles  {r['peak_memory_10m_bytes'] / 1e9:8.2f} GB, "
        f"{r['peak_memory_method']} {mark('peak_memory_10m_bytes')}",
        f"gridding              {r['gridding_particles_per_s'] / 1e6:8.1f} M particles/s "
        f"{mark('gridding_particles_per_s')}; "
        f"{r['concentration_particles_per_s'] / 1e6:.1f} M/s with weights (reduce.concentration)",
        f"first step, warm      {r['first_step_warm_s']:8.2f} s "
        f"({r['first_step_warm_wall_s']:.2f} s with interpreter start) "
        f"{mark('first_step_warm_s')}",
        r["caution"],
    ]
    return "\n".join(lines)
