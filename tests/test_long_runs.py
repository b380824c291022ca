"""Long runs in constant memory: fields streamed to a temporary store, and what must not change.

A run whose 3-D fields (concentration, particle counts, smoothed concentration at every output
time) would exceed walkers.run.store.FIELD_MEMORY_BUDGET writes them to temporary NetCDF4 segment
files as the run goes, and the file writer streams them to the output one output time at a time.
Checked here:

- the streamed and the in-memory run of the same case write the same numbers (np.array_equal on
  every variable of the output and tracks files, NaN equal to NaN);
- the peak memory of a streamed run does not grow with the number of output times, while the
  in-memory twin grows by about the size of its fields (so the check can fail);
- no temporary store is left after success, failure or interruption, and a checkpointed run
  with its fields on disk resumes, even after SIGKILL, to bitwise the uninterrupted result.

Peak memory is the peak resident set size of a process that makes one run, read with getrusage
(RUSAGE_CHILDREN, ru_maxrss in KiB on Linux; POSIX getrusage, common practice) by a small parent
process whose only child it is: read in the test process, RUSAGE_CHILDREN would give the largest
peak of every child the test session ever waited for.
"""

from __future__ import annotations

import gc
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from test_bad_inputs import one_thread  # noqa: F401 (autouse: in-process runs on one thread)
from test_interrupts import CLI, SCENARIO, assert_same_results, leftovers

import walkers.run.checkpoint as checkpoint
import walkers.run.store as run_store
from walkers.api import run_scenario
from walkers.errors import InputError, RunFailure
from walkers.fields.analytic import analytic_flow
from walkers.outputs.writer import write_results
from walkers.run.simulate import simulate
from walkers.run.store import DiskFields, MemoryFields, field_store
from walkers.scenario.config import Dispersion, OutputGrid, Receptor, Release, Transport
from walkers.scenario.load import load_scenario

KIB = 1024


def small_run(fields: str, folder: Path | None = None, on_output=None) -> xr.Dataset:
    """A short run with every kind of output: smoothed fields, a receptor and sampled tracks."""
    flow = analytic_flow(
        "uniform", u=0.3, x_range=(-2000, 2000), y_range=(-1000, 1000), nx=21, ny=11
    )
    return simulate(
        flow,
        Transport(dt=120.0, dispersion=Dispersion(2.0, 2.0), decay_rate=1e-5),
        [Release("point", np.array([[-1500.0, 0.0]]), 400, mass=100.0)],
        start=0.0,
        end=7200.0,
        output_interval=600.0,
        output_grid=OutputGrid(
            x0=-1950.0, dx=100.0, nx=40, y0=-950.0, dy=100.0, ny=20, bandwidth=150.0
        ),
        receptors=[Receptor("intake", 0.0, 0.0, thresholds=(1e-4,))],
        seed=3,
        tracks=3,
        stepper="reference",
        fields=fields,  # type: ignore[arg-type]
        field_folder=folder,
        on_output=on_output,
    )


def stores(folder: Path) -> list[str]:
    """Temporary field stores (and anything in them) under ``folder``."""
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("walkers-fields-*"))


# --------------------------------------------------------------------------------------------
# the same numbers either way
# --------------------------------------------------------------------------------------------


def test_streamed_and_in_memory_runs_write_identical_files(tmp_path):
    held = small_run("memory")
    streamed = small_run("disk", tmp_path)
    assert isinstance(held["concentration"].data, np.ndarray)
    assert streamed["concentration"].chunks[0] == (1,) * streamed.sizes["time"]  # lazy, per time
    a = write_results(held, tmp_path / "held.nc")
    b = write_results(streamed, tmp_path / "streamed.nc")
    assert_same_results(a, b)  # every variable, and the tracks files
    with xr.open_dataset(b) as ds:
        for name in ("concentration", "particle_count", "concentration_smoothed"):
            enc = ds[name].encoding
            assert enc["chunksizes"] == (1, 20, 40) and enc["zlib"] and enc["shuffle"], name


def test_auto_streams_only_fields_above_the_budget(tmp_path, monkeypatch):
    variables = {"concentration": np.float64, "particle_count": np.int32}
    shape = (100, 64, 64)  # 100 * 64 * 64 * 12 bytes = 4.9 MB
    monkeypatch.setattr(run_store, "FIELD_MEMORY_BUDGET", 5_000_000)
    assert isinstance(field_store(shape, variables, "auto", tmp_path), MemoryFields)
    monkeypatch.setattr(run_store, "FIELD_MEMORY_BUDGET", 4_000_000)
    store = field_store(shape, variables, "auto", tmp_path)
    assert isinstance(store, DiskFields)
    store.discard()
    assert stores(tmp_path) == []


# --------------------------------------------------------------------------------------------
# constant memory
# --------------------------------------------------------------------------------------------

# A cheap run: 50 particles in still water (numpy twin), one step per output time, on an n x n
# output grid, run and written by a process of its own.
MEASURED_RUN = """
import sys
import numpy as np
from walkers.fields.analytic import analytic_flow
from walkers.outputs.writer import write_results
from walkers.run.simulate import simulate
from walkers.scenario.config import Dispersion, OutputGrid, Release, Transport

outputs, n, fields, path = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3], sys.argv[4]
flow = analytic_flow("uniform", x_range=(0, 2000), y_range=(0, 2000), nx=11, ny=11)
ds = simulate(
    flow, Transport(dt=60.0, dispersion=Dispersion(1.0, 1.0)),
    [Release("point", np.array([[1000.0, 1000.0]]), 50, mass=1.0)],
    start=0.0, end=60.0 * (outputs - 1), output_interval=60.0,
    output_grid=OutputGrid(x0=5.0, dx=2000 / n, nx=n, y0=5.0, dy=2000 / n, ny=n),
    stepper="reference", fields=fields,
)
write_results(ds, path)
"""
# Starts the run as its only child and prints the child's peak RSS (KiB on Linux).
PEAK_OF_CHILD = """
import resource, subprocess, sys
subprocess.run(sys.argv[1:], check=True)
print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)
"""


def peak_rss(outputs: int, n: int, fields: str, folder: Path) -> int:
    """Peak resident set size (bytes) of a process that runs and writes the measured run."""
    out = folder / f"run_{outputs}_{n}_{fields}.nc"
    out.unlink(missing_ok=True)
    run = [sys.executable, "-c", MEASURED_RUN, str(outputs), str(n), fields, str(out)]
    result = subprocess.run(
        [sys.executable, "-c", PEAK_OF_CHILD, *run], capture_output=True, text=True, timeout=300
    )
    assert result.returncode == 0, result.stderr
    assert out.is_file()
    return int(result.stdout.split()[-1]) * KIB


@pytest.mark.skipif(sys.platform != "linux", reason="ru_maxrss is in KiB on Linux only")
def test_memory_stays_constant_when_fields_stream_to_disk(tmp_path):
    n, short, long = 300, 10, 60
    held = (long - short) * n * n * (8 + 4)  # 54 MB more of concentration and counts
    # a first short run fills numba's on-disk cache of the kernels, so that no measured run
    # compiles them (compiling takes memory that a later allocation in the process reuses)
    peak_rss(short, n, "disk", tmp_path)
    baseline = peak_rss(short, n, "disk", tmp_path)
    streamed = peak_rss(long, n, "disk", tmp_path) - baseline
    # allowed: the dask graph and the HDF5 chunk index (a few kB per output time), not the fields
    assert streamed < held / 8, (streamed, held)
    # twin: the same run with its fields held in memory grows by about the fields' size
    in_memory = peak_rss(long, n, "memory", tmp_path) - baseline
    assert in_memory > 0.8 * held, (in_memory, held, streamed)


# --------------------------------------------------------------------------------------------
# no temporary store left behind
# --------------------------------------------------------------------------------------------


def test_no_store_is_left_after_a_successful_run(tmp_path):
    ds = small_run("disk", tmp_path)
    assert len(stores(tmp_path)) > 0  # the Dataset reads from it
    write_results(ds, tmp_path / "run.nc")
    del ds
    gc.collect()
    assert stores(tmp_path) == []


def test_no_store_is_left_after_a_failed_run(tmp_path):
    def fail(state):
        if state.next_output == 5:
            raise RuntimeError("injected failure")

    with pytest.raises(RuntimeError, match="injected"):
        small_run("disk", tmp_path, on_output=fail)
    assert stores(tmp_path) == []  # at once, not when garbage is collected


def test_no_store_and_no_output_after_a_failed_write(tmp_path, monkeypatch):
    ds = small_run("disk", tmp_path)

    def disk_full(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", disk_full)
    with pytest.raises(RunFailure, match="the disk is full .*No space left"):
        write_results(ds, tmp_path / "run.nc")
    assert not (tmp_path / "run.nc").exists() and leftovers(tmp_path) == []
    del ds
    gc.collect()
    assert stores(tmp_path) == []


def test_no_store_is_left_after_an_interrupted_run(tmp_path):
    def interrupt(state):
        if state.next_output == 5:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        small_run("disk", tmp_path, on_output=interrupt)
    assert stores(tmp_path) == []


# --------------------------------------------------------------------------------------------
# checkpoints of a run whose fields are on disk
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def channel(tmp_path_factory):
    """The interrupt tests' tidal channel, and its uninterrupted output (fields in memory)."""
    folder = tmp_path_factory.mktemp("channel")
    case = folder / "channel.toml"
    case.write_text(SCENARIO)
    reference = folder / "reference.nc"
    run_scenario(load_scenario(case), output=reference)
    return case, reference


def test_a_resumed_run_with_fields_on_disk_gives_the_same_bits(channel, tmp_path, monkeypatch):
    case, reference = channel
    monkeypatch.setattr(run_store, "FIELD_MEMORY_BUDGET", 0)  # every run streams its fields
    monkeypatch.setattr(run_store.tempfile, "tempdir", str(tmp_path))
    sc = load_scenario(case)
    out = tmp_path / "run.nc"
    ckpt = checkpoint.checkpoint_path(out)
    saver = checkpoint.Checkpointer(
        ckpt, checkpoint.run_fingerprint(sc, "fast"), 3 * 3600.0, sc.output_interval, 145
    )

    def stop_after_second_save(state):
        saver(state)
        if state.next_output == 2 * 18 + 1:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_scenario(sc, output=out, on_output=stop_after_second_save)
    meta = checkpoint.read_checkpoint_meta(ckpt)
    folder = checkpoint.fields_folder(ckpt)
    # two checkpoints: two sealed segments, outputs [0, 19) and [19, 37), and nothing else
    assert [s[1:3] for s in meta["fields"]["segments"]] == [[0, 19], [19, 37]]
    assert sorted(p.name for p in folder.iterdir()) == [s[0] for s in meta["fields"]["segments"]]
    with np.load(ckpt) as saved:
        assert "result.field.concentration" not in saved.files  # the fields are not in the npz
    assert stores(tmp_path) == []  # the interrupted run's own store is gone

    state = checkpoint.load_checkpoint(ckpt, checkpoint.run_fingerprint(sc, "fast"))
    assert isinstance(state.results.fields, DiskFields)
    run_scenario(sc, output=out, resume=state)
    assert_same_results(reference, out)
    del state
    checkpoint.remove_checkpoint(ckpt)
    assert not ckpt.exists() and not folder.exists()


def test_a_checkpoint_whose_field_segment_is_gone_is_refused(channel, tmp_path, monkeypatch):
    case, _ = channel
    monkeypatch.setattr(run_store, "FIELD_MEMORY_BUDGET", 0)
    sc = load_scenario(case)
    ckpt = checkpoint.checkpoint_path(tmp_path / "run.nc")
    fingerprint = checkpoint.run_fingerprint(sc, "fast")
    saver = checkpoint.Checkpointer(ckpt, fingerprint, 3600.0, sc.output_interval, 145)

    def stop_after_save(state):
        saver(state)
        if ckpt.exists():
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_scenario(sc, output=tmp_path / "run.nc", on_output=stop_after_save)
    segment = next(checkpoint.fields_folder(ckpt).iterdir())
    segment.unlink()
    with pytest.raises(InputError, match="missing or changed since the checkpoint"):
        checkpoint.load_checkpoint(ckpt, fingerprint)


def test_a_killed_run_with_fields_on_disk_resumes_to_the_same_bits(channel, tmp_path):
    """SIGKILL while a segment is open for writing: the checkpoint lists only closed segments."""
    case, reference = channel
    out = tmp_path / "run.nc"
    ckpt = checkpoint.checkpoint_path(out)
    streaming_cli = "import walkers.run.store; walkers.run.store.FIELD_MEMORY_BUDGET = 0; " + CLI
    temporary = tmp_path / "tmp"
    temporary.mkdir()
    proc = subprocess.Popen(
        [sys.executable, "-c", streaming_cli, "run", str(case), "-o", str(out), "--no-plot"]
        + ["-q", "--checkpoint-every", "1 h"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        env={**os.environ, "TMPDIR": str(temporary)},
    )
    try:
        deadline = time.monotonic() + 180.0
        while proc.poll() is None and time.monotonic() < deadline:
            if ckpt.exists() and checkpoint.read_checkpoint_meta(ckpt)["next_output"] >= 13:
                break
            time.sleep(0.005)
        assert proc.poll() is None, "the run ended before its second checkpoint"
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert not out.exists()
    sc = load_scenario(case)
    state = checkpoint.load_checkpoint(ckpt, checkpoint.run_fingerprint(sc, "fast"))
    assert isinstance(state.results.fields, DiskFields)
    run_scenario(sc, output=out, resume=state)
    assert_same_results(reference, out)
