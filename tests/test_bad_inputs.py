"""A catalogue of bad input, end to end through ``walkers run``: scenario, flow files, command line.

Every case must end with exit code 2 and one clear message that names the place (file, key,
variable or option) and says how to fix it, without a traceback. The unit tests of the scenario
reader (tests/test_scenario.py) check the messages key by key; here each kind of mistake goes
through the command line as a user would make it. The numerical guards of a run (non-finite
velocity met during a run, non-finite positions, budget precision, memory) are at the end.
"""

from __future__ import annotations

import decimal
import math
import os
from collections import namedtuple
from pathlib import Path

import flowfiles as ff
import netCDF4
import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from walkers.cli import main
from walkers.errors import InputError, RunFailure
from walkers.fields.analytic import grid_flow
from walkers.run import simulate as simulate_module
from walkers.run.runner import PARTICLE_WORKING_BYTES
from walkers.run.simulate import MAX_DECAY_STEPS, UNIT_ROUNDOFF, check_budget_precision, simulate
from walkers.scenario.config import Dispersion, OutputGrid, Release, Transport

# An analytic-flow scenario that runs in a fraction of a second (an invented channel).
ANALYTIC = """\
[run]
title = "Bad-input catalogue: analytic channel"
start = "2026-05-04T06:00:00Z"
end = "2026-05-04T07:00:00Z"
time_step = "60 s"
output_interval = "30 min"
seed = 5

[flow.analytic]
kind = "uniform"
u = "0.2 m/s"
depth = "4 m"
extent = ["0 km", "4 km", "-500 m", "500 m"]
cells = [41, 11]

[dispersion]
coefficient = "1 m2/s"

[decay]
half_life = "2 d"

[[releases]]
name = "spill"
x = "500 m"
y = "0 m"
start = "2026-05-04T06:00:00Z"
duration = "0 s"
mass = "10 kg"
particles = 200

[output.grid]
west = "0 m"
east = "4 km"
south = "-500 m"
north = "500 m"
cell_size = "200 m"

[[receptors]]
name = "intake"
x = "2 km"
y = "0 m"
"""

# A flow-file scenario on the synthetic file of tests/flowfiles.py: frames hourly from
# 2026-03-01T00:00Z to 04:00Z, cell centres x 500..2500 m, y 200..1200 m, an island (land) at
# x 1400..1600 m, y 600..800 m.
FLOWFILE = """\
[run]
start = "2026-03-01T00:00:00Z"
end = "2026-03-01T03:00:00Z"
time_step = "60 s"
output_interval = "30 min"

[flow]
files = "flow.nc"

[dispersion]
coefficient = "0.5 m2/s"

[[releases]]
name = "outfall"
x = "1000 m"
y = "500 m"
start = "2026-03-01T00:00:00Z"
mass = "1 kg"
particles = 100

[output.grid]
west = "500 m"
east = "2500 m"
south = "200 m"
north = "1200 m"
cell_size = "100 m"

[[receptors]]
name = "beach"
x = "2000 m"
y = "1000 m"
"""


@pytest.fixture(scope="module", autouse=True)
def one_thread():
    """Runs on one thread: results do not depend on the number (tests/test_engine.py checks
    that), and the runs stay quick on a busy machine."""
    import numba

    before = numba.get_num_threads()
    numba.set_num_threads(1)
    yield
    numba.set_num_threads(before)


Case = namedtuple("Case", "id edits args expected")


def case(id_, edits=(), args=(), expected=()):
    return pytest.param(Case(id_, list(edits), list(args), list(expected)), id=id_)


def apply(text: str, edits) -> str:
    for old, new in edits:
        assert old in text, f"edit target {old!r} not in the base scenario"
        text = text.replace(old, new, 1)
    return text


def invoke(args, cwd: Path):
    """Run ``walkers`` in-process from ``cwd``; return the click Result."""
    here = os.getcwd()
    os.chdir(cwd)
    try:
        return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)
    finally:
        os.chdir(here)


def assert_refused(result, expected, code=2):
    text = result.output
    assert result.exit_code == code, text
    assert "Traceback" not in text, text
    assert "unexpected failure" not in text, text
    for part in expected:
        assert part in text, f"{part!r} not in {text!r}"


# ---------------------------------------------------------------------------------------------
# The scenario file.
# ---------------------------------------------------------------------------------------------

SCENARIO_CASES = [
    case(
        "malformed TOML",
        [('end = "', 'end = "2026-05-04T07:00:00Z\nbroken = "')],
        expected=["case.toml", "not valid TOML", "line"],
    ),
    case("not UTF-8", [('title = "', 'title = "\udcff')], expected=["case.toml", "cannot read"]),
    case("empty file", [(ANALYTIC, "")], expected=["case.toml", "run", "required"]),
    case(
        "misspelled key",
        [("time_step", "time_stpe")],
        expected=["run.time_stpe", "did you mean 'time_step'"],
    ),
    case(
        "misspelled section",
        [("[[receptors]]", "[[receptor]]")],
        expected=["receptor", "did you mean 'receptors'"],
    ),
    case(
        "unknown key",
        [("seed = 5", 'seed = 5\ncolour = "blue"')],
        expected=["run.colour", "unknown key", "Keys accepted"],
    ),
    case("missing run table", [("[run]", "[runs]")], expected=["runs", "did you mean 'run'"]),
    case(
        "missing required key",
        [('start = "2026-05-04T06:00:00Z"\n', "")],
        expected=["run.start", "required", "ISO 8601"],
    ),
    case("missing mass", [('mass = "10 kg"\n', "")], expected=["releases[0]", "mass"]),
    case(
        "text for a number",
        [("particles = 200", 'particles = "many"')],
        expected=["releases[0].particles", "whole number"],
    ),
    case(
        "fraction for a count", [("seed = 5", "seed = 1.5")], expected=["run.seed", "whole number"]
    ),
    case(
        "number for a word",
        [('kind = "uniform"', "kind = 3")],
        expected=["flow.analytic.kind", "one of"],
    ),
    case(
        "text for a boolean",
        [("seed = 5", 'seed = 5\nsubstep = "yes"')],
        expected=["run.substep", "true or false"],
    ),
    case(
        "negative mass",
        [('mass = "10 kg"', 'mass = "-10 kg"')],
        expected=["releases[0].mass", "greater than 0"],
    ),
    case(
        "zero time step",
        [('time_step = "60 s"', 'time_step = "0 s"')],
        expected=["run.time_step", "greater than 0"],
    ),
    case(
        "zero particles",
        [("particles = 200", "particles = 0")],
        expected=["releases[0].particles", "greater than 0"],
    ),
    case(
        "negative dispersion",
        [('coefficient = "1 m2/s"', 'coefficient = "-1 m2/s"')],
        expected=["dispersion.coefficient", "0 or greater"],
    ),
    case(
        "zero half-life",
        [('half_life = "2 d"', 'half_life = "0 d"')],
        expected=["decay.half_life", "greater than 0"],
    ),
    case(
        "infinite mass", [('mass = "10 kg"', "mass = inf")], expected=["releases[0].mass", "finite"]
    ),
    case(
        "mass in metres",
        [('mass = "10 kg"', 'mass = "10 m"')],
        expected=["releases[0].mass", "length", "kg"],
    ),
    case(
        "time step in kilograms",
        [('time_step = "60 s"', 'time_step = "60 kg"')],
        expected=["run.time_step", "mass", "min"],
    ),
    case(
        "velocity in m2/s",
        [('u = "0.2 m/s"', 'u = "0.2 m2/s"')],
        expected=["flow.analytic.u", "velocity", "cm/s"],
    ),
    case(
        "velocity so large that |u| dt overflows",
        [('u = "0.2 m/s"', "u = 1e308")],
        expected=["flow velocity 'u'", "overflows", "units"],
    ),
    case(
        "unknown unit",
        [('cell_size = "200 m"', 'cell_size = "200 yards"')],
        expected=["output.grid.cell_size", "unknown unit", "km"],
    ),
    case(
        "end before start",
        [('end = "2026-05-04T07:00:00Z"', 'end = "2026-05-04T05:00:00Z"')],
        expected=["run.end", "after run.start"],
    ),
    case(
        "time without zone",
        [('start = "2026-05-04T06:00:00Z"', 'start = "2026-05-04T06:00"')],
        expected=["run.start", "zone"],
    ),
    case(
        "interval not a multiple",
        [('output_interval = "30 min"', 'output_interval = "25.5 min"')],
        expected=["run.output_interval", "whole multiple", "run.time_step"],
    ),
    case(
        "interval longer than the run",
        [('output_interval = "30 min"', 'output_interval = "2 h"')],
        expected=["run.output_interval", "longer than the run"],
    ),
    case(
        "release before the run",
        [('start = "2026-05-04T06:00:00Z"\nduration', 'start = "2026-05-04T05:00:00Z"\nduration')],
        expected=["releases[0].start", "run.start"],
    ),
    case(
        "release lasting past the end",
        [('duration = "0 s"', 'duration = "2 h"')],
        expected=["releases[0]", "run.end"],
    ),
    case(
        "release outside the flow",
        [('x = "500 m"', 'x = "9 km"')],
        expected=["releases[0] (spill)", "outside the flow domain"],
    ),
    case(
        "receptor outside the flow",
        [('x = "2 km"', 'x = "-3 km"')],
        expected=["receptors[0] (intake)", "outside the flow domain"],
    ),
    case(
        "output grid off the flow",
        [('west = "0 m"\neast = "4 km"', 'west = "10 km"\neast = "12 km"')],
        expected=["output.grid", "does not overlap"],
    ),
    case(
        "too many particles",
        [("particles = 200", "particles = 100000001")],
        expected=["releases", "at most 1e+08"],
    ),
    case(
        "more tracks than particles",
        [("seed = 5", "seed = 5\ntracks = 500")],
        expected=["run.tracks", "200 particles"],
    ),
    case(
        "misspelled choice",
        [("[flow.analytic]", '[edges]\neast = "open"\n\n[flow.analytic]')],
        expected=["edges.east", "'absorbing', 'reflecting'"],
    ),
    case(
        "output arrays beyond memory",
        [
            ('end = "2026-05-04T07:00:00Z"', 'end = "2026-05-11T07:00:00Z"'),
            ('output_interval = "30 min"', 'output_interval = "1 min"\ntracks = 1000000'),
            ("particles = 200", "particles = 1000000"),
        ],  # 10 081 output times of 1e6 sampled tracks: 320 GB (fields would stream to disk)
        expected=["output:", "output times", "GB", "coarser output.grid"],
    ),
    case(
        "decay steps beyond budget precision",
        [
            ('end = "2026-05-04T07:00:00Z"', 'end = "2026-07-04T06:00:00Z"'),
            ('time_step = "60 s"', 'time_step = "1 s"'),
            ('output_interval = "30 min"', 'output_interval = "1 d"'),
            ('cell_size = "200 m"', 'cell_size = "1 km"'),
        ],
        expected=["run.time_step", "5270400 steps", "1e-09", "time step of at least 2 s"],
    ),
    case(
        "run not a whole number of outputs",
        [('end = "2026-05-04T07:00:00Z"', 'end = "2026-05-04T07:10:00Z"')],
        expected=["run.end - run.start", "run.output_interval", "600 s earlier or 1200 s later"],
    ),
]


@pytest.mark.parametrize("c", SCENARIO_CASES)
def test_bad_scenario_is_refused_with_exit_2_and_a_named_fix(c, tmp_path):
    text = apply(ANALYTIC, c.edits)
    (tmp_path / "case.toml").write_text(text, encoding="utf-8", errors="surrogateescape")
    result = invoke(["run", "case.toml", "--no-plot", "-q", *c.args], tmp_path)
    assert_refused(result, c.expected)
    assert not (tmp_path / "case.nc").exists()


# ---------------------------------------------------------------------------------------------
# Flow files.
# ---------------------------------------------------------------------------------------------


def _hole(value: float, when: float):
    """The test flow with ``value`` at the water cell centred on (1000, 500) from ``when`` (s)."""

    def fn(x, y, t):
        u, v = ff.velocity(x, y, t)
        if t >= when:
            u = np.where((x == 1000.0) & (y == 500.0), value, u)
        return u, v

    return fn


def _velocity_missing(path: Path) -> None:
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("x", 3)
        ds.createDimension("y", 2)
        var = ds.createVariable("depth", "f8", ("y", "x"))
        var.standard_name = "sea_floor_depth_below_sea_surface"
        var.units = "m"
        var[:] = 5.0


FLOW_CASES = [
    case(
        "flow file missing",
        [('files = "flow.nc"', 'files = "nowhere.nc"')],
        expected=["flow.files", "no such file", "relative to the scenario file"],
    ),
    case(
        "flow file not NetCDF",
        [('files = "flow.nc"', 'files = "notes.nc"')],
        expected=["notes.nc", "not a NetCDF file"],
    ),
    case(
        "flow file without velocity",
        [('files = "flow.nc"', 'files = "depth_only.nc"')],
        expected=["depth_only.nc", "no eastward (x) velocity (u) found", "[flow.variables]"],
    ),
    case(
        "velocity variable named but absent",
        [("[dispersion]", '[flow.variables]\nu = "speed"\n\n[dispersion]')],
        expected=["'speed'", "not in the file", "Variables in the file"],
    ),
    case(
        "flow units of the wrong dimension",
        [("[dispersion]", '[flow.units]\nu = "m"\n\n[dispersion]')],
        expected=["flow.units.u", "velocity", "m/s"],
    ),
    case(
        "run beyond the flow frames",
        [('end = "2026-03-01T03:00:00Z"', 'end = "2026-03-01T06:00:00Z"')],
        expected=["2026-03-01T06:00:00", "outside", "2026-03-01T04:00:00"],
    ),
    case(
        "release on land",
        [('x = "1000 m"\ny = "500 m"', 'x = "1500 m"\ny = "700 m"')],
        expected=["releases[0] (outfall)", "on land", "move it into the water"],
    ),
    case(
        "receptor on land",
        [('x = "2000 m"\ny = "1000 m"', 'x = "1500 m"\ny = "650 m"')],
        expected=["receptors[0] (beach)", "on land", "move it into the water"],
    ),
    case(
        "release outside the flow grid",
        [('x = "1000 m"', 'x = "2600 m"')],
        expected=["releases[0] (outfall)", "outside the flow domain"],
    ),
    case(
        "NaN velocity in a wet cell met during the run",
        [('files = "flow.nc"', 'files = "hole_nan.nc"')],
        expected=["hole_nan.nc", "2026-03-01T02:00:00", "x=1000, y=500", "mark the cell as land"],
    ),
    case(
        "infinite velocity in a wet cell met during the run",
        [('files = "flow.nc"', 'files = "hole_inf.nc"')],
        expected=["hole_inf.nc", "2026-03-01T02:00:00", "x=1000, y=500", "mark the cell as land"],
    ),
]


@pytest.fixture(scope="module")
def flow_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("flows")
    ff.write_flow(folder / "flow.nc", land=ff.island)
    ff.write_flow(folder / "hole_nan.nc", land=ff.island, flow=_hole(np.nan, 7200.0))
    ff.write_flow(folder / "hole_inf.nc", land=ff.island)
    with netCDF4.Dataset(folder / "hole_inf.nc", "a") as ds:  # a true +inf, not a fill value
        ds["u"].set_auto_mask(False)
        ds["u"][2, 3, 5] = np.inf  # 02:00, the water cell centred on (1000, 500)
    (folder / "notes.nc").write_text("minutes of the harbour committee\n")
    _velocity_missing(folder / "depth_only.nc")
    return folder


@pytest.mark.parametrize("c", FLOW_CASES)
def test_bad_flow_file_is_refused_with_exit_2_and_a_named_fix(c, flow_dir):
    (flow_dir / "case.toml").write_text(apply(FLOWFILE, c.edits))
    result = invoke(["run", "case.toml", "--no-plot", "-q", *c.args], flow_dir)
    assert_refused(result, c.expected)
    assert not (flow_dir / "case.nc").exists()


def test_the_flow_file_base_case_runs(flow_dir, tmp_path):
    # twin of the flow-file catalogue: the unedited scenario is accepted and written
    (flow_dir / "ok.toml").write_text(FLOWFILE)
    result = invoke(["run", "ok.toml", "--no-plot", "-q", "-o", tmp_path / "ok.nc"], flow_dir)
    assert result.exit_code == 0, result.output
    assert (tmp_path / "ok.nc").is_file()


# ---------------------------------------------------------------------------------------------
# The command line.
# ---------------------------------------------------------------------------------------------

CLI_CASES = [
    case(
        "scenario file missing",
        args=["--", "absent.toml"],
        expected=["absent.toml", "no such scenario file"],
    ),
    case("output exists", args=["-o", "taken.nc"], expected=["taken.nc", "exists", "--overwrite"]),
    case(
        "output directory missing",
        args=["-o", "no/such/dir/out.nc"],
        expected=["no/such/dir", "does not exist", "create it"],
    ),
    case("output is a directory", args=["-o", "."], expected=["'.'", "is a directory"]),
    case("unknown stepper", args=["--stepper", "compiled"], expected=["--stepper", "'fast'"]),
    case("misspelled option", args=["--overwirte"], expected=["--overwirte", "--overwrite"]),
    case(
        "checkpoint interval in metres",
        args=["--checkpoint-every", "2 m"],
        expected=["--checkpoint-every", "length", "a time is needed"],
    ),
    case(
        "checkpoint interval of zero",
        args=["--checkpoint-every", "0 h"],
        expected=["--checkpoint-every", "greater than 0"],
    ),
    case(
        "resume without a checkpoint",
        args=["--resume"],
        expected=["--resume", "no checkpoint", "--checkpoint-every"],
    ),
    case(
        "stale checkpoint without --resume",
        args=["-o", "stale.nc"],
        expected=["stale.nc.checkpoint.npz", "--resume", "delete the checkpoint"],
    ),
    case(
        "damaged checkpoint",
        args=["-o", "stale.nc", "--resume"],
        expected=["stale.nc.checkpoint.npz", "cannot be read", "without --resume"],
    ),
]


@pytest.mark.parametrize("c", CLI_CASES)
def test_bad_command_line_is_refused_with_exit_2_and_a_named_fix(c, tmp_path):
    (tmp_path / "case.toml").write_text(ANALYTIC)
    (tmp_path / "taken.nc").write_text("an earlier result")
    (tmp_path / "stale.nc.checkpoint.npz").write_text("not a checkpoint")
    args = c.args if c.args[:1] == ["--"] else ["case.toml", *c.args]
    result = invoke(["run", "--no-plot", "-q", *args], tmp_path)
    assert_refused(result, c.expected)
    assert (tmp_path / "taken.nc").read_text() == "an earlier result"


def test_unwritable_output_directory_is_refused(tmp_path, monkeypatch):
    # root may write anywhere, so the directory's refusal is simulated for it alone
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    real_access = os.access
    monkeypatch.setattr(
        os, "access", lambda p, mode, **kw: False if Path(p) == locked else real_access(p, mode)
    )
    (tmp_path / "case.toml").write_text(ANALYTIC)
    result = invoke(["run", "case.toml", "--no-plot", "-q", "-o", locked / "out.nc"], tmp_path)
    assert_refused(result, [str(locked), "not writable", "choose another"])


def test_particles_beyond_the_memory_available_are_refused_saying_how_many_fit(
    tmp_path, monkeypatch
):
    import psutil

    available = 50_000_000  # bytes
    memory = namedtuple("memory", "available total")(available, 4 * available)
    monkeypatch.setattr(psutil, "virtual_memory", lambda: memory)
    text = apply(ANALYTIC, [("particles = 200", "particles = 2000000")])
    (tmp_path / "case.toml").write_text(text)
    result = invoke(["run", "case.toml", "--no-plot", "-q"], tmp_path)
    assert_refused(result, ["releases: 2000000 particles", "would fit", "fewer particles"])
    fit = int(result.output.split("about ")[-1].split(" particles would fit")[0])
    assert 0 < fit < available / PARTICLE_WORKING_BYTES


def test_the_analytic_base_case_runs(tmp_path):
    # twin of the catalogue: the unedited scenario is accepted and written
    (tmp_path / "case.toml").write_text(ANALYTIC)
    result = invoke(["run", "case.toml", "--no-plot", "-q"], tmp_path)
    assert result.exit_code == 0, result.output
    assert (tmp_path / "case.nc").is_file()


def test_bad_input_through_a_real_process_exits_2_without_traceback(tmp_path):
    import subprocess
    import sys

    (tmp_path / "case.toml").write_text(apply(ANALYTIC, [('mass = "10 kg"', 'mass = "10 m"')]))
    cmd = "import sys; from walkers.cli import main; sys.exit(main())"
    proc = subprocess.run(
        [sys.executable, "-c", cmd, "run", "case.toml", "--no-plot"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 2, proc.stderr
    assert proc.stderr.startswith("walkers: error: case.toml: releases[0].mass = '10 m'")
    assert "Traceback" not in proc.stderr + proc.stdout


# ---------------------------------------------------------------------------------------------
# Whatever the edit, only walkers' own refusal (exit 2) or a run (exit 0) comes out.
# ---------------------------------------------------------------------------------------------

_LINES = [line for line in ANALYTIC.splitlines() if " = " in line]
_VALUES = st.one_of(
    st.sampled_from(
        [
            '"-1 h"',
            '"1e400 m"',
            '"nan kg"',
            '"0 s"',
            "[]",
            "{}",
            "true",
            '"5 m/s"',
            '"2026-05-04T06:30:00Z"',
            "1e308",
            "-3",
            '"a\\u0000b"',
            '"*.nc"',
            '""',
            "1000000000000",
            "1e-300",
            "1e-9",
            "-0.0",
            "2.5",
            "inf",
            "nan",
        ]
    ),
    # small enough that an accepted edit still runs in a moment (a valid edit can ask for
    # as many particles or cells as it names)
    st.integers(-50, 5000).map(str),
    st.text(st.characters(blacklist_categories=("Cs",)), max_size=8).map(repr),
)


@settings(
    max_examples=20, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(line=st.sampled_from(_LINES), value=_VALUES)
def test_random_edits_end_in_a_run_or_a_clean_refusal(tmp_path, line, value):
    key = line.split(" = ")[0]
    text = ANALYTIC.replace(line, f"{key} = {value}", 1)
    (tmp_path / "case.toml").write_text(text, encoding="utf-8")
    result = invoke(["run", "case.toml", "--no-plot", "-q", "--overwrite"], tmp_path)
    assert result.exit_code in (0, 2), result.output
    assert "Traceback" not in result.output
    if result.exit_code == 2:
        assert result.output.startswith("walkers: error: ") or "Error:" in result.output


# ---------------------------------------------------------------------------------------------
# Numerical guards of a run.
# ---------------------------------------------------------------------------------------------

X = np.linspace(-2000.0, 2000.0, 41)
Y = np.linspace(-1000.0, 1000.0, 21)
FRAMES = np.arange(0.0, 7201.0, 600.0)  # s


def _flow_with(value: float | None):
    """Uniform 0.3 m/s along x, with ``value`` at the wet cell centred on (1000, 0) from 1 h."""

    def velocity(x, y, t):
        u = np.full_like(x, 0.3)
        if value is not None and t >= 3600.0:
            u = np.where((x == 1000.0) & (y == 0.0), value, u)
        return u, np.zeros_like(x)

    return grid_flow(X, Y, FRAMES, velocity)


def _run(flow, **kwargs):
    return simulate(
        flow,
        Transport(dt=60.0, dispersion=Dispersion(5.0, 5.0)),
        [Release("point", np.array([[-500.0, 0.0]]), 300, mass=1.0, name="spill")],
        start=0.0,
        end=7200.0,
        output_interval=1800.0,
        output_grid=OutputGrid(x0=-1950.0, dx=100.0, nx=40, y0=-950.0, dy=100.0, ny=20),
        seed=1,
        time_step_check="off",
        **kwargs,
    )


@pytest.mark.parametrize("value", [np.nan, np.inf, -np.inf])
def test_non_finite_velocity_in_a_wet_cell_met_during_a_run_names_place_and_time(value):
    # The run reaches the frame at 01:00 only after two outputs: the guard acts during the run.
    with pytest.raises(
        InputError,
        match=r"velocity 'u' is -?(nan|inf) at x=1000, y=0 in the frame at "
        r"2000-01-01T01:00:00\+00:00, where the cell is wet; fix the flow there",
    ):
        _run(_flow_with(value))


def test_non_finite_velocity_on_land_is_no_concern():
    # twin: the same hole in a land cell is a wall, and the run goes on
    def velocity(x, y, t):
        return np.where((x == 1000.0) & (y == 0.0), np.nan, 0.3), np.zeros_like(x)

    land = ~((np.abs(X - 1000.0) < 1.0)[None, :] & (np.abs(Y) < 1.0)[:, None])
    ds = _run(grid_flow(X, Y, FRAMES, velocity, wet=land))
    assert float(ds.budget_released[-1]) == pytest.approx(1.0)


def test_a_non_finite_particle_position_stops_the_run_naming_the_time(monkeypatch):
    real = simulate_module.mover.advance
    calls = []

    def advance(state, inputs, t0, dt, nsteps, *args):
        real(state, inputs, t0, dt, nsteps, *args)
        calls.append(t0)
        if len(calls) == 3:
            state.x[7] = np.nan

    monkeypatch.setattr(simulate_module.mover, "advance", advance)
    with pytest.raises(
        RunFailure,
        match=r"1 particle\(s\) got a non-finite position while moving between "
        r"2000-01-01T01:00:00\+00:00 and 2000-01-01T01:30:00\+00:00 \(first: particle 7 of "
        r"release 'spill'\)",
    ):
        _run(_flow_with(None))


def test_engine_calls_are_cut_into_pieces_without_changing_the_numbers(monkeypatch):
    # With whole-second times the start of each piece is exact, so the result is bitwise equal.
    whole = _run(_flow_with(None))
    steps = []
    real = simulate_module.mover.advance

    def advance(state, inputs, t0, dt, nsteps, *args):
        steps.append(nsteps)
        real(state, inputs, t0, dt, nsteps, *args)

    monkeypatch.setattr(simulate_module.mover, "advance", advance)
    monkeypatch.setattr(simulate_module, "PARTICLE_STEPS_PER_CALL", 300 * 7)
    pieces = _run(_flow_with(None))
    assert steps == [7, 7, 7, 7, 2] * 4  # 30 steps per output interval, 7 per call
    for name in whole.variables:
        np.testing.assert_array_equal(pieces[name].values, whole[name].values)


def test_budget_precision_bound_on_decay_steps():
    check_budget_precision(10**8, MAX_DECAY_STEPS, 1e-5, 1.0)
    check_budget_precision(10**8, 10 * MAX_DECAY_STEPS, 0.0, 1.0)  # no decay, no product
    with pytest.raises(
        InputError,
        match=r"run.time_step: .* at most 4503599 steps are allowed; use a time step "
        r"of at least 2 s \(this one is 1 s",
    ):
        check_budget_precision(10, MAX_DECAY_STEPS + 1, 1e-5, 1.0)
    with pytest.raises(InputError, match=r"releases: 100000001 particles .* at most 1e\+08"):
        check_budget_precision(10**8 + 1, 10, 0.0, 1.0)


def test_repeated_decay_factor_stays_within_the_stated_bound():
    # Reference: the exact exp(-k S dt) in 40-digit decimal arithmetic (Python's decimal module).
    # Bound: relative error <= 2 S u (the rounded factor's error repeats; Higham 2002, §3.1,
    # from memory); with S = 2e5 steps the bound is 4.4e-11.
    k, dt, steps = 1e-5, 60.0, 200_000
    factor = math.exp(-k * dt)
    mass = 1.0
    for _ in range(steps):
        mass *= factor
    decimal.getcontext().prec = 40
    exact = (-decimal.Decimal(k) * decimal.Decimal(dt) * steps).exp()
    error = abs(decimal.Decimal(mass) / exact - 1)
    assert float(error) <= 2 * steps * UNIT_ROUNDOFF
