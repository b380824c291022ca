"""Three-dimensional runs: the scenario keys (each wrong value refused naming its key), Stokes'
law for grain sizes, the flow a 3-D run needs, and `walkers inspect` of a 3-D scenario. The runs
themselves are checked in tests/test_vertical_runs.py, whose scenario tables these reuse."""

import json
import math

import pytest
from test_vertical_runs import PARABOLIC, SETTLING, H, scenario

from walkers.errors import InputError
from walkers.fields.netcdf.open import open_flow
from walkers.run import column
from walkers.scenario.config import Vertical
from walkers.scenario.load import load_scenario
from walkers.scenario.settling import stokes_settling_velocity

# ---------------------------------------------------------------------------------------------
# Stokes' law (Stokes 1851, Trans. Camb. Phil. Soc. 9): the buoyant weight of a sphere balances
# the drag 3 π μ d w; a 10 µm quartz grain in sea water settles at about 0.07 mm/s


def test_stokes_settling_balances_the_buoyant_weight_against_the_drag():
    d, rho_s, rho, mu, g = 10e-6, 2650.0, 1026.0, 1.2e-3, 9.80665
    w = stokes_settling_velocity(d, rho_s)
    weight = (rho_s - rho) * g * math.pi * d**3 / 6.0
    assert 3.0 * math.pi * mu * d * w == pytest.approx(weight, rel=1e-12)
    assert 0.06e-3 < w < 0.08e-3
    # the twin: the drag of a twice larger grain does not balance this grain's weight
    assert 3.0 * math.pi * mu * 2 * d * stokes_settling_velocity(2 * d, rho_s) != pytest.approx(
        weight, rel=1e-3
    )
    with pytest.raises(InputError, match=r"releases\[0\].grain_sizes\[1\] = 200 um: Stokes"):
        stokes_settling_velocity(200e-6, rho_s, "releases[0].grain_sizes[1]")
    with pytest.raises(InputError, match=r"grain: grains of density 1000 kg/m3 do not sink"):
        stokes_settling_velocity(d, 1000.0, "grain")


# ---------------------------------------------------------------------------------------------
# Bad inputs name the key


@pytest.mark.parametrize(
    ("vertical", "release", "message"),
    [
        (None, {"behaviour": "settling", "settling_velocity": "1 mm/s"}, r"releases\[0\]\.behav"),
        (None, {"start_height": "bed"}, r"releases\[0\]\.start_height: applies to three-dim"),
        ({"diffusivity": "constant"}, None, r"vertical\.coefficient"),
        ({"diffusivity": "parabolic"}, None, r"vertical\.diffusivity = 'parabolic'.*roughness"),
        (
            {
                "diffusivity": "constant",
                "coefficient": "0.01 m2/s",
                "bed": "depositing",
                "deposition_velocity": "0.1 mm/s",
                "critical_shear_stress": "0.2 Pa",
                "erosion_rate": "1e-4 1/s",
            },
            None,
            r"vertical\.diffusivity = 'constant'.*resuspension .* needs the bed roughness",
        ),
        ({"diffusivity": "sideways"}, None, r"vertical\.diffusivity = 'sideways'"),
        ({**PARABOLIC, "substep_fraction": 0.5}, None, r"vertical\.substep_fraction = 0\.5: must"),
        ({**PARABOLIC, "substep_fraction": 0}, None, r"vertical\.substep_fraction"),
        ({**PARABOLIC, "substep_fraction": "small"}, None, r"vertical\.substep_fraction"),
        (
            {"diffusivity": "constant", "coefficient": "0.01 m2/s", "bed": "depositing"},
            None,
            r"vertical: missing; give one of deposition_velocity",
        ),
        (
            {"diffusivity": "constant", "coefficient": "0.01 m2/s", "deposition_velocity": 1e-4},
            None,
            r"vertical\.deposition_velocity: applies only when bed = 'depositing'",
        ),
        (
            {"diffusivity": "constant", "coefficient": "0.01 kg"},
            None,
            r"vertical\.coefficient = '0.01 kg'",
        ),
        (
            PARABOLIC,
            {"behaviour": "settling", "settling_velocities": ["1 mm/s", "2 mm/s"]},
            r"releases\[0\]\.settling_velocities: give the share",
        ),
        (
            PARABOLIC,
            {
                "behaviour": "settling",
                "settling_velocities": ["1 mm/s", "2 mm/s"],
                "fractions": [0.5, 0.6],
            },
            r"releases\[0\]\.fractions = \[0.5, 0.6\]: the shares must add up to 1",
        ),
        (
            PARABOLIC,
            {"behaviour": "settling", "grain_sizes": ["300 um"], "fractions": [1.0]},
            r"releases\[0\]\.grain_sizes\[0\] = 300 um: Stokes' law holds",
        ),
        (PARABOLIC, {"behaviour": "rising"}, r"releases\[0\]: missing; give one of rise_velocity"),
        (
            PARABOLIC,
            {"behaviour": "settling", "grain_sizes": ["10 um", "20 um"], "fractions": [1.0]},
            r"releases\[0\]\.fractions: 1 fractions for 2 grain sizes",
        ),
        (
            PARABOLIC,
            {"behaviour": "settling", "settling_velocity": "1 mm/s", "fractions": [1.0]},
            r"releases\[0\]\.fractions: shares go with settling_velocities or grain_sizes",
        ),
        (
            PARABOLIC,
            {
                "behaviour": "settling",
                "grain_sizes": ["10 um"],
                "fractions": [1.0],
                "grain_density": "1 g/cm3",
            },
            r"releases\[0\]\.grain_density = 1000 kg/m3: grains must be denser",
        ),
        (
            PARABOLIC,
            {"start_height": "middle"},
            r"releases\[0\]\.start_height = 'middle'.*'surface', 'bed', 'column', 'above_bed'",
        ),
        (
            PARABOLIC,
            {"start_height": "above_bed", "height_above_bed": "-1 m"},
            r"releases\[0\]\.height_above_bed = '-1 m': must be 0 or greater",
        ),
        (
            PARABOLIC,
            {"behaviour": "rising", "settling_velocity": "1 mm/s", "rise_velocity": "1 mm/s"},
            r"releases\[0\]\.settling_velocity: applies only when behaviour = 'settling'",
        ),
        (
            PARABOLIC,
            {"start_height": "above_bed"},
            r"releases\[0\]: missing; give one of height_above_bed",
        ),
    ],
)
def test_bad_vertical_keys_are_refused_naming_the_key(vertical, release, message):
    with pytest.raises(InputError, match=message):
        load_scenario(scenario(vertical=vertical, release=release))


def test_3d_needs_a_depth_from_the_flow_file(tmp_path):
    from flowfiles import write_flow

    path = write_flow(tmp_path / "flow.nc", depth=None)
    flow = open_flow(path, constant_depth=8.0)
    with pytest.raises(InputError, match=r"vertical: the flow file .* has no water depth"):
        column.check_column_flow(flow, Vertical(diffusivity="constant", coefficient=0.01))
    flow.close()
    # the twin: the same file with its depth is accepted
    path = write_flow(tmp_path / "deep.nc")
    flow = open_flow(path)
    column.check_column_flow(flow, Vertical(diffusivity="constant", coefficient=0.01))
    flow.close()


def toml_text(table, prefix=""):
    """TOML of a scenario table of the shapes :func:`scenario` makes (values, tables, arrays of
    tables), for the command line."""
    plain = {k: v for k, v in table.items() if not isinstance(v, dict | list) or _values(v)}
    lines = [f"{k} = {json.dumps(v)}" for k, v in plain.items()]
    for k, v in table.items():
        name = f"{prefix}{k}"
        if isinstance(v, dict):
            lines += [f"[{name}]", toml_text(v, f"{name}.")]
        elif isinstance(v, list) and not _values(v):
            for item in v:
                lines += [f"[[{name}]]", toml_text(item, f"{name}.")]
    return "\n".join(lines)


def _values(v):
    return isinstance(v, list) and not any(isinstance(i, dict) for i in v)


def test_inspect_of_a_scenario_says_whether_its_run_is_3d(tmp_path):
    """`walkers inspect case.toml`: K_z, the bed, the behaviours and Visser's substeps of a 3-D
    run (u* = sqrt(0.0025) 0.3 m/s = 0.015 m/s in 4 m: substeps of at most 0.01 h / (2 κ u*) =
    3.25 s, so 19 for a step of 60 s); a depth-averaged one says so (the twin)."""
    from click.testing import CliRunner

    from walkers.cli import main

    out = {}
    for name, vertical in (("deep", PARABOLIC), ("flat", None)):
        table = scenario(vertical=vertical, release=SETTLING if vertical else None, u=0.3)
        path = tmp_path / f"{name}.toml"
        path.write_text(toml_text(table), encoding="utf-8")
        res = CliRunner().invoke(main, ["inspect", str(path)])
        assert res.exit_code == 0, res.output
        out[name] = res.output
    assert "Run: three-dimensional: parabolic K_z = 0.41 u* z (1 - z/h)" in out["deep"]
    assert "depositing bed, w_d = 0.5 mm/s" in out["deep"]
    assert "vertical velocity: none (no vertical advection)" in out["deep"]
    assert "r: settling (50 % at 0.1 mm/s, 50 % at 1 mm/s), from 1 m above the bed" in out["deep"]
    assert f"up to {math.ceil(60.0 / (0.01 * H / (2 * 0.41 * 0.015)))} (Visser" in out["deep"]
    assert "Run: depth-averaged" in out["flat"] and "three-dimensional" not in out["flat"]


def test_the_substep_fraction_reaches_the_step_and_inspect(tmp_path):
    """vertical.substep_fraction = 0.0025 (default 0.01): the kernel's parameters carry it, and
    `walkers inspect` counts four times the substeps of Visser's criterion (u* = 0.015 m/s in
    4 m: substeps of at most 0.0025 h / (2 κ u*) = 0.81 s, so 74 for a step of 60 s); the
    default's count is the twin."""
    from click.testing import CliRunner

    from walkers.cli import main
    from walkers.engine import mover, vertical
    from walkers.fields.analytic import grid_flow
    from walkers.scenario.config import Transport

    counts = {}
    for fraction in (0.0025, None):
        table = {**PARABOLIC, **({"substep_fraction": fraction} if fraction else {})}
        path = tmp_path / f"case_{fraction}.toml"
        path.write_text(
            toml_text(scenario(vertical=table, release=SETTLING, u=0.3)), encoding="utf-8"
        )
        res = CliRunner().invoke(main, ["inspect", str(path)])
        assert res.exit_code == 0, res.output
        counts[fraction] = res.output
    quarter = math.ceil(60.0 / (0.0025 * H / (2 * 0.41 * 0.015)))
    assert f"up to {quarter} (Visser 1997: each at most 0.0025 /" in counts[0.0025]
    assert f"up to {quarter} (Visser" not in counts[None]
    assert "each at most 0.01 /" in counts[None]

    xc = [0.0, 100.0, 200.0]
    flow = grid_flow(xc, xc, [0.0, 1e9], lambda X, Y, t: (0.0 * X, 0.0 * Y), depth=H)
    window = flow.window(0.0, 1e9)
    inputs = mover.kernel_inputs(flow, window, Transport(dt=60.0))
    for fraction, expected in ((0.0025, 0.0025), (None, vertical.VISSER_FRACTION)):
        settings = Vertical(
            drag_coefficient=0.0025, **({"substep_fraction": fraction} if fraction else {})
        )
        column_inputs = mover.column_inputs(inputs, flow, window, settings, 0.015, 60.0)
        assert column_inputs.column[2][vertical.P_FRACTION] == expected


def test_the_roughness_of_an_estimated_dispersion_reaches_a_constant_kz_too(tmp_path):
    """One bed roughness for the run: a constant K_z (no u* needed) still takes the estimated
    [dispersion]'s Manning n, for the law of the wall below the lowest layer centre of a layered
    velocity, and the run's summary says which applies; with a given horizontal K there is no
    roughness, and the lowest layer's value is held (the twin)."""
    from test_column_files import sigma_file

    constant = {"diffusivity": "constant", "coefficient": "0.01 m2/s"}
    estimated = scenario(vertical=constant)
    estimated["dispersion"] = {"method": "estimated", "manning_n": 0.025, "channel": "meandering"}
    layered = open_flow(sigma_file(tmp_path)[0], column=True)
    said = []
    for table, n in ((estimated, 0.025), (scenario(vertical=constant), None)):
        v = load_scenario(table).transport_base.vertical
        assert v is not None and v.manning_n == n and v.drag_coefficient is None
        said.append(column.describe_vertical(v, layered))
    assert said[0].endswith(
        "below the lowest layer centre the law of the wall to z0 of the roughness"
    )
    assert said[1].endswith("below the lowest layer centre its value (no bed roughness given)")


def test_template_vertical_block_loads_when_uncommented(tmp_path):
    """The template of `walkers new` carries a commented [vertical] block and release keys that
    load as they stand once uncommented; the template itself stays depth-averaged (the twin)."""
    import re

    from walkers.scenario.docs import template_text

    keys = "diffusivity|drag_coefficient|bed =|deposition_velocity|behaviour|settling_velocity"
    text = re.sub(rf"^# (\[vertical\]|{keys}|start_height)", r"\1", template_text(), flags=re.M)
    path = tmp_path / "deep.toml"
    path.write_text(text, encoding="utf-8")
    sc = load_scenario(path)
    assert sc.transport_base.vertical == Vertical(drag_coefficient=0.0025, deposition_velocity=1e-4)
    r = sc.releases[0]
    assert (r.behaviour, r.settling, r.start_height) == ("settling", (5e-4,), "bed")
    (tmp_path / "flat.toml").write_text(template_text(), encoding="utf-8")
    assert load_scenario(tmp_path / "flat.toml").transport_base.vertical is None
