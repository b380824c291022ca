"""Provenance and storage of a run's output, read back from the file ``walkers run`` wrote.

Every output must let a reader redo the run: the tool version, the full scenario text, the seed,
and each input file's name, size, modification time and SHA-256. The SHA-256 is checked against
Python's hashlib (FIPS 180-4, Secure Hash Standard); sizes and times against os.stat. The fields
are stored chunked one output time per chunk and compressed (zlib with shuffle), read back
through the netCDF4 library.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import shutil
from pathlib import Path

import flowfiles as ff
import netCDF4
import pytest
from test_bad_inputs import FLOWFILE, invoke, one_thread  # noqa: F401 (autouse)

import walkers
from walkers.outputs.reader import read_results

# The flow-file scenario of the bad-input catalogue, with a seed and sampled tracks.
SCENARIO = "# Provenance test on an invented estuary.\n" + FLOWFILE.replace(
    'output_interval = "30 min"\n', 'output_interval = "30 min"\nseed = 4242\ntracks = 3\n'
)


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("provenance")
    ff.write_flow(folder / "flow.nc", land=ff.island)
    (folder / "case.toml").write_text(SCENARIO)
    result = invoke(["run", "case.toml", "--no-plot", "-q"], folder)
    assert result.exit_code == 0, result.output
    return folder, folder / "case.nc"


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_output_records_version_full_scenario_text_seed_and_caution(run):
    _, out = run
    with netCDF4.Dataset(out) as nc:
        assert nc.walkers_version == walkers.__version__
        assert nc.history.endswith(f"created by walkers {walkers.__version__}")
        assert nc.scenario == SCENARIO  # byte for byte, comments included
        assert int(nc.seed) == 4242
        assert nc.caution == walkers.CAUTION


def test_input_files_record_name_size_time_and_sha256_of_each_file(run):
    folder, out = run
    with netCDF4.Dataset(out) as nc:
        records = json.loads(nc.input_files)
    assert [Path(r["path"]).name for r in records] == ["case.toml", "flow.nc"]
    for r in records:
        path = Path(r["path"])
        assert path.is_absolute() and path.parent == folder.resolve()
        st = path.stat()
        assert r["bytes"] == st.st_size
        when = dt.datetime.fromtimestamp(st.st_mtime, dt.UTC).isoformat(timespec="seconds")
        assert r["modified"] == when
        assert r["sha256"] == _sha256(path)


def test_a_changed_input_file_no_longer_matches_its_record(run, tmp_path):
    # twin: the record identifies the file; one byte changed and the SHA-256 differs
    folder, out = run
    with netCDF4.Dataset(out) as nc:
        record = next(r for r in json.loads(nc.input_files) if r["path"].endswith("flow.nc"))
    copy = tmp_path / "flow.nc"
    shutil.copyfile(folder / "flow.nc", copy)
    assert _sha256(copy) == record["sha256"]
    data = bytearray(copy.read_bytes())
    data[-1] ^= 0x01
    copy.write_bytes(bytes(data))
    assert _sha256(copy) != record["sha256"]


def test_provenance_survives_reading_the_output_back(run):
    _, out = run
    ds = read_results(out)
    assert ds.attrs["scenario"] == SCENARIO
    assert int(ds.attrs["seed"]) == 4242
    assert json.loads(ds.attrs["input_files"])[1]["sha256"] == _sha256(run[0] / "flow.nc")


def test_tracks_file_names_version_and_seed(run):
    folder, out = run
    with netCDF4.Dataset(out) as nc:
        tracks = folder / nc.tracks_file
    with netCDF4.Dataset(tracks) as nc:
        assert nc.walkers_version == walkers.__version__
        assert int(nc.seed) == 4242
        assert nc.caution == walkers.CAUTION


def test_fields_are_chunked_per_output_time_and_compressed(run):
    _, out = run
    with netCDF4.Dataset(out) as nc:
        assert nc.data_model == "NETCDF4"
        ny, nx = nc.dimensions["y"].size, nc.dimensions["x"].size
        for name in ("concentration", "particle_count"):
            var = nc[name]
            assert var.dimensions == ("time", "y", "x")
            assert var.chunking() == [1, ny, nx]  # one output time per chunk
            filters = var.filters()
            assert filters["zlib"] and filters["shuffle"] and filters["complevel"] == 4
        assert nc["receptor_concentration"].filters()["zlib"]
