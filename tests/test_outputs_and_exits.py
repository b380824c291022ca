"""What a run shows and how its results and errors reach the user (issue 17, beside the fault
campaign of tests/test_faults.py): particles released at an output time are in that output,
``walkers inspect`` describes a file that lacks what a run needs, every documented reader gives
the summary, the memory check counts what a streaming run holds, plot and export read a result
one output time at a time, and every kind of error reaches the user with its exit code.
"""

from __future__ import annotations

import errno
from pathlib import Path

import flowfiles as ff
import numpy as np
import pytest
from test_bad_inputs import invoke, one_thread  # noqa: F401 (autouse: runs on one thread)
from test_faults import SCENARIO, refused

from walkers.errors import InputError, RunFailure
from walkers.outputs.export import receptors_to_csv
from walkers.outputs.figures import plot_results
from walkers.outputs.reader import open_results, read_results
from walkers.outputs.summary import summary_text
from walkers.outputs.writer import write_results
from walkers.run.runner import memory_estimate
from walkers.scenario.load import load_scenario


@pytest.fixture
def case(tmp_path):
    """The bend scenario of tests/test_faults.py beside its flow (the plain synthetic one)."""
    ff.write_flow(tmp_path / "bend.nc", land=ff.island)
    (tmp_path / "bend.toml").write_text(SCENARIO)
    return tmp_path


# --------------------------------------------------------------------------------------------
# 6. the start time shows the start; inspect describes; the API reads its own results
# --------------------------------------------------------------------------------------------


def start_cloud(case: Path):
    """The bend with all 300 particles released at once at the run start, simulated."""
    from walkers.run.runner import simulate_scenario

    (case / "bend.toml").write_text(SCENARIO.replace('duration = "1 h"', 'duration = "0 s"'))
    return simulate_scenario(load_scenario(case / "bend.toml"))


def test_particles_released_at_the_start_are_in_the_first_output(case):
    ds = start_cloud(case)
    # mass conservation (common practice): the box-counted concentration times the cell volume
    # (100 m x 100 m x 8 m of water) sums to the 1 kg released, all of it in water at 00:00
    assert float(ds["budget_released"][0]) == pytest.approx(1.0, rel=1e-12)
    assert float(ds["budget_in_water"][0]) == pytest.approx(1.0, rel=1e-12)
    assert float(ds["concentration"][0].sum()) * 100.0 * 100.0 * 8.0 == pytest.approx(1.0, 1e-12)
    assert int(ds["particles_in_water"][0]) == 300
    assert np.isfinite(ds["track_x"].values[:, 0]).all()


def test_twin_without_entering_the_water_the_first_output_is_empty(case, monkeypatch):
    monkeypatch.setattr("walkers.run.simulate.enter_water", lambda particles, t: None)
    ds = start_cloud(case)
    assert float(ds["budget_released"][0]) == 0.0 and float(ds["concentration"][0].sum()) == 0.0


def test_inspect_describes_a_file_without_depth(tmp_path):
    flow = ff.write_flow(tmp_path / "velocity.nc", land=ff.island, depth=None, crs=None)
    result = invoke(["inspect", flow], tmp_path)
    text = refused(result, 0, "velocity.nc", "21 x 11 cells", "5 frames", "missing for a run")
    assert "[flow] depth" in text and "[flow] crs" in text
    # twin: a run of that file is refused for the depth that the report says is missing
    (tmp_path / "x.toml").write_text(SCENARIO.replace('"bend.nc"', '"velocity.nc"'))
    refused(invoke(["run", "x.toml", "-q", "--no-plot"], tmp_path), 2, "no water depth found")


def test_every_documented_reader_gives_a_summary(tmp_path):
    from results_fixture import gaussian_puff_results

    path = write_results(gaussian_puff_results(), tmp_path / "run.nc")
    readers = [(read, s) for read in (read_results, open_results) for s in (False, True)]
    texts = [summary_text(read(path, stream=s)) for read, s in readers]
    # the same budget and peaks whatever the reader (times are shown in UTC once decoded)
    numbers = [[w for w in t.split() if w[:1].isdigit() and "T" not in w] for t in texts]
    assert all(n == numbers[0] for n in numbers)


def test_check_memory_counts_streamed_fields_once(case, monkeypatch):
    import walkers.run.store as store
    from walkers.fields.scenario_flow import build_flow

    sc = load_scenario(case / "bend.toml")
    flow = build_flow(sc.flow)
    _, in_memory = memory_estimate(sc, flow)
    monkeypatch.setattr(store, "FIELD_MEMORY_BUDGET", 0)
    _, streamed = memory_estimate(sc, flow)
    cells = 20 * 10
    per_time = cells * (8 + 4)  # concentration and counts
    assert in_memory - streamed == (2 * 25 - 3) * per_time


def largest_reads(monkeypatch) -> dict[str, int]:
    """Record, per variable, the most values read from a result file in one go."""
    import xarray.backends.netCDF4_ as backend

    largest: dict[str, int] = {}
    original = backend.NetCDF4ArrayWrapper._getitem

    def recording(self, key):
        values = original(self, key)
        name = self.variable_name
        largest[name] = max(largest.get(name, 0), int(np.size(values)))
        return values

    monkeypatch.setattr(backend.NetCDF4ArrayWrapper, "_getitem", recording)
    return largest


def test_plot_and_export_read_a_result_frame_by_frame(tmp_path, monkeypatch):
    """Plot and export of a result file never read more than one output time of a field."""
    from results_fixture import gaussian_puff_results

    path = tmp_path / "run.nc"
    write_results(gaussian_puff_results(nt=9), path)  # 9 output times of 24 x 40 cells
    frame = 24 * 40
    largest = largest_reads(monkeypatch)
    plot_results(path, tmp_path)
    receptors_to_csv(open_results(path, stream=True), tmp_path / "r.csv")
    assert largest["concentration"] == frame
    assert largest.get("particle_count", 0) <= frame
    largest.clear()
    read_results(path)  # the twin: reading the whole result reads every output time at once
    assert largest["concentration"] == 9 * frame


# --------------------------------------------------------------------------------------------
# 7. exit codes: every kind of error the catalogue knows, and a real defect
# --------------------------------------------------------------------------------------------

EXITS = [  # what a command meets, the exit code the user sees
    (InputError("a bad key"), 2),
    (RunFailure("a damaged frame"), 1),
    (OSError(errno.ENOSPC, "No space left on device", "/full/out.nc"), 1),
    (OSError(errno.EDQUOT, "Disk quota exceeded", "/full/out.nc"), 1),
    (OSError(errno.EACCES, "Permission denied", "/locked/out.nc"), 1),
    (OSError(errno.EROFS, "Read-only file system", "/locked/out.nc"), 1),
    (OSError(errno.EIO, "Input/output error"), 3),  # not a fault walkers can name: a defect
    (ZeroDivisionError("a real defect"), 3),
]


@pytest.mark.parametrize(
    "error,code", EXITS, ids=[f"{type(e).__name__}{e.args[0]}" for e, _ in EXITS]
)
def test_each_kind_of_error_reaches_the_user_with_its_exit_code(error, code, capsys):
    from walkers.cli import friendly_errors

    @friendly_errors
    def command():
        raise error

    with pytest.raises(SystemExit) as stop:
        command()
    message = capsys.readouterr().err
    assert stop.value.code == code, message
    assert ("defect of walkers" in message) == (code == 3), message
    if isinstance(error, OSError) and code == 1:
        assert error.filename in message
