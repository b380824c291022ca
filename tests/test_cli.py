"""The command line end to end: demo scenarios, GIS and CF checks on real outputs, exit codes.

External references: the CF checker (cfchecker, CF Conventions 1.8, Eaton et al. 2020) and GDAL's
netCDF driver through rasterio, as in tests/test_io.py.
"""

import tomllib
import warnings
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner
from test_io import cf_errors

import walkers
from walkers.api import run_scenario
from walkers.cli import main
from walkers.scenario.load import load_scenario

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


def short_demo(name: str, hours: float, particles: int) -> dict:
    """A demo scenario cut short, as a dict (so tests stay quick)."""
    data = tomllib.loads((SCENARIOS / name).read_text())
    start = np.datetime64(data["run"]["start"].replace("Z", ""))
    end = start + np.timedelta64(int(hours * 3600), "s")
    data["run"]["end"] = str(end) + "Z"
    for rel in data["releases"]:
        rel["particles"] = particles
        rel_start = np.datetime64(rel["start"].replace("Z", ""))
        rel["start"] = str(min(rel_start, start + np.timedelta64(1800, "s"))) + "Z"
    return data


@pytest.fixture(scope="module")
def estuary_output(tmp_path_factory):
    data = short_demo("saltmarsh_estuary.toml", hours=6.0, particles=3000)
    scenario = load_scenario(data, base_dir=SCENARIOS)
    path = tmp_path_factory.mktemp("estuary") / "estuary.nc"
    outcome = run_scenario(scenario, output=path)
    return outcome


def test_demo_output_passes_the_cf_checker(estuary_output):
    errors, report = cf_errors(estuary_output.path)
    assert errors == 0, report


def test_demo_output_opens_in_gdal_with_the_same_georeferencing(estuary_output):
    rasterio = pytest.importorskip("rasterio")
    ds = xr.open_dataset(estuary_output.path)
    x, y = ds.x.values, ds.y.values
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with rasterio.open(f'NETCDF:"{estuary_output.path}":concentration_max') as src:
            assert src.crs.to_epsg() == 32630  # the demo flow's CRS, carried through
            assert src.transform.c == pytest.approx(x[0] - 50.0)
            assert src.transform.f == pytest.approx(y[-1] + 50.0)
            np.testing.assert_array_equal(src.read(1), ds.concentration_max.values[::-1])


def test_demo_mass_budget_closes_and_summary_carries_the_caution(estuary_output):
    ds = estuary_output.results
    residual = (
        ds.budget_released
        - ds.budget_in_water
        - ds.budget_outflow.sum("edge")
        - ds.budget_decayed
        - ds.budget_held_dry
    )
    assert float(abs(residual).max()) <= 1e-12 * float(ds.budget_released.max())
    assert float(ds.budget_released[-1]) == pytest.approx(500.0, rel=1e-12)  # all of it by 05:30
    assert walkers.CAUTION in estuary_output.summary
    assert "bathing beach" in estuary_output.summary


def test_run_command_writes_output_figures_and_keeps_existing_files(tmp_path):
    runner = CliRunner()
    case = tmp_path / "case.toml"
    assert runner.invoke(main, ["new", str(case)]).exit_code == 0
    text = case.read_text().replace("particles = 20000", "particles = 500")
    case.write_text(text)
    result = runner.invoke(main, ["run", str(case), "-q"])
    assert result.exit_code == 0, result.output
    out = tmp_path / "case.nc"
    assert out.is_file() and (tmp_path / "case_figures" / "concentration_max.png").is_file()
    assert walkers.CAUTION in result.output
    before = out.read_bytes()
    again = runner.invoke(main, ["run", str(case), "-q", "--no-plot"])
    assert again.exit_code == 2 and "--overwrite" in again.output
    assert out.read_bytes() == before
    assert "Traceback" not in again.output
    replaced = runner.invoke(main, ["run", str(case), "-q", "--no-plot", "--overwrite"])
    assert replaced.exit_code == 0


def test_summary_csv_geojson_and_report_show_the_same_numbers_in_the_same_unit(
    estuary_output, tmp_path
):
    """The demo's peaks, in the thresholds' unit (mg/L), read alike from every product."""
    import csv
    import json
    import re

    result = estuary_output.path
    out = CliRunner().invoke(
        main,
        ["export", str(result), str(tmp_path / "r.csv"), "--geojson", str(tmp_path / "l.geojson"),
         "--geotiff", str(tmp_path / "m.tif")],
    )  # fmt: skip
    assert out.exit_code == 0, out.output
    report = CliRunner().invoke(main, ["report", str(result), "-o", str(tmp_path / "r.html")])
    assert report.exit_code == 0, report.output
    summary = estuary_output.summary
    html = (tmp_path / "r.html").read_text()
    rows = list(csv.reader((tmp_path / "r.csv").open()))
    assert rows[0][:3] == ["time (UTC)", "hours since run start", "bathing beach (mg/L)"]
    points = {
        f["properties"]["name"]: f["properties"]
        for f in json.loads((tmp_path / "l.geojson").read_text())["features"]
        if f["properties"]["layer"] == "receptor"
    }
    for k, name in enumerate(estuary_output.results.receptor.values):
        column = [float(r[2 + k]) for r in rows[1:]]
        peak = max(column)
        if peak == 0:
            assert f"{name}: no particles reached it" in summary
            continue
        text = re.search(rf"{name}: peak ([0-9.]+) mg/L", summary).group(1)
        assert float(text) == pytest.approx(peak, rel=5e-3)  # 3 significant figures
        assert points[str(name)]["peak_concentration"] == float(text)
        assert points[str(name)]["unit"] == "mg/L"
        assert f"{text} mg/L" in html
    assert "e-0" not in summary and "kg m-3" not in summary


def test_version_is_shown():
    result = CliRunner().invoke(main, ["--version"])
    assert walkers.__version__ in result.output


def test_verify_command_reports_and_fails_on_unknown_case():
    runner = CliRunner()
    ok = runner.invoke(main, ["verify", "--case", "rotation"])
    assert ok.exit_code == 0 and "PASS" in ok.output and "Butcher" in ok.output
    bad = runner.invoke(main, ["verify", "--case", "nonsense"])
    assert bad.exit_code == 2 and "known:" in bad.output


def test_inspect_command_describes_the_demo_flow(tmp_path):
    result = CliRunner().invoke(
        main,
        [
            "inspect",
            str(SCENARIOS / "millbrook_canal_flow.nc"),
            "--map",
            str(tmp_path / "speed.png"),
        ],
    )
    assert result.exit_code == 0, result.output
    assert "EPSG:32630" in result.output and (tmp_path / "speed.png").is_file()


def test_every_option_has_help_and_command_summaries_are_whole():
    import click

    for name, command in main.commands.items():
        for param in command.params:
            if isinstance(param, click.Option):
                assert param.help, f"walkers {name} {param.opts[0]} has no help"
    listing = CliRunner().invoke(main, ["--help"]).output
    commands = listing.split("Commands:")[1]
    assert "..." not in commands
    assert len(commands.strip().splitlines()) == len(main.commands)


def test_verify_help_lists_the_case_names():
    from walkers.verify.cases import CASES

    text = CliRunner().invoke(main, ["verify", "--help"], terminal_width=400).output
    listed = text.split("Run only this case (repeatable):")[1].split(".")[0]
    assert [name.strip() for name in listed.split(",")] == list(CASES)
