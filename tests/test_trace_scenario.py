"""``walkers trace`` on the Saltmarsh Estuary demo, the trace scenario's checks at the door, and
the trace file against the CF checker (CF Conventions 1.8, Eaton et al. 2020)."""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from test_io import cf_errors

import walkers
from walkers.attribution.output import read_trace, write_trace
from walkers.cli import main
from walkers.errors import InputError
from walkers.scenario.trace import load_trace_scenario

DEMO = Path(__file__).resolve().parents[1] / "scenarios" / "saltmarsh_trace.toml"


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("trace")
    out = folder / "demo_trace.nc"
    result = CliRunner().invoke(main, ["trace", str(DEMO), "-o", str(out), "--particles", "2000"])
    return result, out


def test_demo_trace_ranks_the_three_outfalls(demo_run):
    result, out = demo_run
    assert result.exit_code == 0, result.output
    ds = read_trace(out)
    assert list(ds["candidate"].values) == [
        "harbour basin outfall",
        "boatyard slipway drain",
        "east shore outfall",
    ]
    assert sorted(ds["candidate_rank"].values.tolist()) == [1, 2, 3]
    assert float(ds["probability"].sum()) == pytest.approx(1.0)
    assert ds["influence"].dims == ("detection", "time", "y", "x")
    assert ds["influence"].attrs["units"] == "m-3"
    assert "proves nothing" in ds.attrs["ranking_caution"]
    assert ds.attrs["caution"] == walkers.CAUTION
    assert "1. " in result.output and "proves nothing" in result.output
    figures = sorted(p.name for p in out.with_name(out.stem + "_figures").iterdir())
    assert figures == ["influence_1.png", "influence_2.png", "ranking.png"]


def test_demo_trace_file_passes_the_cf_checker(demo_run):
    errors, report = cf_errors(demo_run[1])
    assert errors == 0, report


def test_trace_file_is_not_overwritten_unless_asked(demo_run):
    out = demo_run[1]
    ds = read_trace(out)
    with pytest.raises(InputError, match="exists"):
        write_trace(ds, out)
    assert write_trace(ds, out, overwrite=True) == out


def test_reading_a_file_that_is_no_trace_result_is_refused(tmp_path):
    import xarray as xr

    path = tmp_path / "other.nc"
    xr.Dataset({"a": ("x", np.zeros(2))}).to_netcdf(path)
    with pytest.raises(InputError, match="not a trace result"):
        read_trace(path)


def demo_table() -> dict:
    raw = tomllib.loads(DEMO.read_text())
    raw["flow"]["files"] = [str(DEMO.parent / "saltmarsh_estuary_flow.nc")]
    return raw


def changed(path: str, value):
    raw = demo_table()
    *parents, last = path.split(".")
    table = raw
    for key in parents:
        table = table[key[:-3]][int(key[-2])] if key.endswith("]") else table[key]
    if value is None:
        del table[last]
    else:
        table[last] = value
    return raw


@pytest.mark.parametrize(
    "path,value,message",
    [
        ("attribution.particles", None, r"attribution.particles: required key missing"),
        ("attribution.sigmma", 0.3, r"attribution.sigmma: unknown key; did you mean 'sigma'"),
        ("attribution.interval", 1.5, r"attribution.interval = 1.5: a probability between"),
        ("detections[0].result", "absent", r"detections\[0\]: result needs detection_limit"),
        ("detections[0].end", "2026-05-04T09:00:00Z", r"detections\[0\].end = .* must lie in"),
        ("candidates[1].end", "2026-05-04T00:30:00Z", r"candidates\[1\].end = .* must lie in"),
        ("detections[1].detection_limit", None, r"result needs detection_limit as well"),
        ("candidates[2].name", "boatyard slipway drain", r"candidates\[2\].name = .* must differ"),
    ],
)
def test_bad_trace_scenarios_name_the_key(path, value, message):
    with pytest.raises(InputError, match=message):
        load_trace_scenario(changed(path, value))


def test_a_scenario_without_detections_is_refused():
    raw = demo_table()
    del raw["detections"]
    with pytest.raises(InputError, match=r"detections: at least one \[\[detections\]\] table"):
        load_trace_scenario(raw)


def test_a_candidate_on_land_is_refused():
    from walkers.attribution.scenario_run import trace_scenario

    question = load_trace_scenario(changed("candidates[0].x", "430100 m"))
    with pytest.raises(InputError, match=r"candidates\[0\] \(harbour basin outfall\)"):
        trace_scenario(question, particles=10)


def test_trace_command_reports_bad_input_without_a_traceback(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(DEMO.read_text().replace("particles = 20000", "particles = -1"))
    result = CliRunner().invoke(main, ["trace", str(bad), "-o", str(tmp_path / "x.nc")])
    assert result.exit_code == 2
    assert "attribution.particles" in result.output and "Traceback" not in result.output


def test_outputs_doc_names_every_variable_of_a_trace_file(demo_run):
    import xarray as xr
    from test_docs import DOCS, undocumented

    with xr.open_dataset(demo_run[1], decode_times=False) as raw:
        missing = undocumented(raw, (DOCS / "outputs.md").read_text(encoding="utf-8"))
    assert not missing, f"docs/outputs.md does not name {missing}"
