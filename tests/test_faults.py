"""The fault campaign: what real work does to a run, and that nothing is lost or misreported.

Each fault is made on loopback or in a temporary folder and bounded in time:

- inputs are never written over: the output, tracks, checkpoint, CSV and figures refuse every
  spelling of an input of the run (the same name, a symbolic or hard link, ``..`` in the path),
  with or without ``--overwrite`` (exit 2, both paths named);
- a flow file with a damaged chunk (checksummed by HDF5's Fletcher-32 filter, so damage is
  detected as it is in any checksummed or compressed file) or truncated at several lengths stops
  the run with the file, the variable and the frame time named (exit 1) or is refused at the door
  (exit 2), never as a defect (exit 3); the last checkpoint is kept;
- a full disk (a small tmpfs mounted for the test where the test runs as root, else the write
  error simulated) and a read-only output folder: exit 1, the path named, an existing output left
  whole, no temporary file left;
- SIGKILL at 20 points (fixed seed) of a run with checkpoints, each resumed: bitwise the
  uninterrupted result;
- a flow file replaced while a run reads it: refused through the SHA-256 recorded at the start.

The Dask worker killed mid-ensemble is tests/test_ensemble.py
(test_a_worker_lost_mid_run_leaves_the_result_unchanged).
"""

from __future__ import annotations

import errno
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import flowfiles as ff
import netCDF4
import numpy as np
import pytest
import xarray as xr
from test_bad_inputs import FLOWFILE, apply, invoke, one_thread  # noqa: F401 (autouse)
from test_interrupts import assert_same_results, leftovers

import walkers.outputs.writer as writer
import walkers.run.checkpoint as checkpoint
from walkers.api import run_scenario
from walkers.errors import InputError, RunFailure
from walkers.scenario.load import load_scenario

# An invented river bend on the synthetic flow of tests/flowfiles.py (hourly frames from
# 2026-03-01T00:00Z to 04:00Z; an island at x 1400..1600 m, y 600..800 m). The scenario is named
# like its flow file, so its default output name is the flow file's.
SCENARIO = apply(
    FLOWFILE,
    [
        ("[run]", '[run]\ntitle = "Fault campaign: invented river bend"\nseed = 5\ntracks = 3'),
        ('end = "2026-03-01T03:00:00Z"', 'end = "2026-03-01T04:00:00Z"'),
        ('output_interval = "30 min"', 'output_interval = "10 min"'),
        ('files = "flow.nc"', 'files = "bend.nc"'),
        ('mass = "1 kg"', 'duration = "1 h"\nmass = "1 kg"'),
        ("particles = 100", "particles = 300"),
    ],
)
FRAMES = [f"2026-03-01T0{h}:00:00+00:00" for h in range(5)]


def sha(path: Path) -> str:
    import hashlib

    return hashlib.sha256(path.read_bytes()).hexdigest()


def write_checksummed_flow(path: Path) -> Path:
    """The synthetic flow with every variable in chunks under HDF5's Fletcher-32 checksum, one
    frame per chunk, uncompressed (so a frame's bytes can be found in the file)."""
    plain = path.with_name("plain_" + path.name)
    ff.write_flow(plain, land=ff.island)
    with netCDF4.Dataset(plain) as src, netCDF4.Dataset(path, "w") as dst:
        dst.setncatts(src.__dict__)
        for name, dim in src.dimensions.items():
            dst.createDimension(name, None if dim.isunlimited() else len(dim))
        for name, var in src.variables.items():
            var.set_auto_maskandscale(False)
            attrs = var.__dict__
            fill = attrs.pop("_FillValue", None)
            chunks = tuple(1 if d == "time" else len(src.dimensions[d]) for d in var.dimensions)
            out = dst.createVariable(
                name,
                var.dtype,
                var.dimensions,
                fill_value=fill,
                **({"chunksizes": chunks, "fletcher32": True} if var.dimensions else {}),
            )
            out.setncatts(attrs)
            out.set_auto_maskandscale(False)
            out[...] = var[...]
    plain.unlink()
    return path


def frame_offset(path: Path, name: str, frame: int | None) -> int:
    """Byte offset in ``path`` of the stored values of variable ``name`` (one frame, or all of
    a variable without time)."""
    with netCDF4.Dataset(path) as ds:
        var = ds[name]
        var.set_auto_maskandscale(False)
        raw = np.asarray(var[frame] if frame is not None else var[...])
    blob = path.read_bytes()
    pattern = raw.astype(raw.dtype.newbyteorder("<")).tobytes()
    found = [m for m in range(len(blob)) if blob.startswith(pattern, m)] if raw.size else []
    # frames alike (v does not change with time) are found in the order they were written
    at = found[0] if len(found) == 1 else found[frame or 0]
    return at + raw.nbytes // 2


def damage(path: Path, offset: int) -> None:
    """Flip the bits of one byte, keeping the file's size and modification time (a repair by a
    copy that keeps times, e.g. ``cp -p``, then lets a checkpointed run go on)."""
    st = path.stat()
    with open(path, "r+b") as fh:
        fh.seek(offset)
        byte = fh.read(1)
        fh.seek(offset)
        fh.write(bytes([byte[0] ^ 0xFF]))
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))


def make_bend(folder: Path) -> tuple[Path, Path]:
    """bend.toml, its checksummed flow bend.nc and the uninterrupted result, in ``folder``."""
    write_checksummed_flow(folder / "bend.nc")
    (folder / "bend.toml").write_text(SCENARIO)
    reference = folder / "reference.nc"
    run_scenario(load_scenario(folder / "bend.toml"), output=reference)
    return folder, reference


def copy_case(source: Path, folder: Path) -> Path:
    """A fresh copy of the bend's scenario and flow (times kept) in ``folder``, to harm."""
    folder.mkdir()
    for name in ("bend.toml", "bend.nc"):
        shutil.copy2(source / name, folder / name)
    return folder


@pytest.fixture(scope="module")
def bend(tmp_path_factory):
    return make_bend(tmp_path_factory.mktemp("bend"))


@pytest.fixture
def case(bend, tmp_path):
    return copy_case(bend[0], tmp_path / "case")


def same_numbers(a: Path, b: Path) -> None:
    """Bitwise the same results; the attributes that name the flow file's folder may differ."""
    assert_same_results(a, b, ignore=frozenset({"source", "input_files"}))


def refused(result, code: int, *parts: str) -> str:
    text = result.output
    assert result.exit_code == code, text
    assert "Traceback" not in text and "unexpected failure" not in text, text
    for part in parts:
        assert part in text, f"{part!r} not in {text!r}"
    return text


# --------------------------------------------------------------------------------------------
# 1. inputs are never written over
# --------------------------------------------------------------------------------------------


def spellings(folder: Path, name: str) -> dict[str, Path]:
    """Other names of folder/name: a symbolic link, a hard link, a path through '..'."""
    (folder / "sub").mkdir(exist_ok=True)
    soft, hard = folder / f"soft_{name}", folder / f"hard_{name}"
    soft.symlink_to(folder / name)
    os.link(folder / name, hard)
    return {"same": folder / name, "soft": soft, "hard": hard, "dots": folder / "sub" / ".." / name}


@pytest.mark.parametrize("overwrite", [[], ["--overwrite"]])
def test_run_never_writes_over_its_flow_file_or_scenario(case, overwrite):
    before = {n: sha(case / n) for n in ("bend.nc", "bend.toml")}
    # the default output name of bend.toml is bend.nc, the flow file
    refused(invoke(["run", "bend.toml", "-q", "--no-plot", *overwrite], case), 2, "bend.nc")
    for kind, path in {**spellings(case, "bend.nc"), "scenario": case / "bend.toml"}.items():
        result = invoke(["run", "bend.toml", "-q", "--no-plot", "-o", path, *overwrite], case)
        text = refused(result, 2, "is the input file", str(path))
        assert "never written over" in text, kind
    assert {n: sha(case / n) for n in before} == before


def test_the_tracks_file_and_the_checkpoint_may_not_be_an_input(case):
    os.replace(case / "bend.nc", case / "out_tracks.nc")
    (case / "bend.toml").write_text(SCENARIO.replace('"bend.nc"', '"out_tracks.nc"'))
    result = invoke(["run", "bend.toml", "-q", "--no-plot", "-o", "out.nc", "--overwrite"], case)
    refused(result, 2, "out_tracks.nc", "is the input file")
    os.replace(case / "out_tracks.nc", case / "x.nc.checkpoint.npz")
    (case / "bend.toml").write_text(SCENARIO.replace('"bend.nc"', '"x.nc.checkpoint.npz"'))
    args = ["run", "bend.toml", "-q", "--no-plot", "-o", "x.nc", "--checkpoint-every", "1 h"]
    result = invoke(args, case)
    refused(result, 2, "x.nc.checkpoint.npz", "is the input file")


def test_a_resumed_checkpoint_is_an_input(case):
    sc = load_scenario(case / "bend.toml")
    ckpt = case / "kept.npz"
    with pytest.raises(InputError, match="is the input file"):
        run_scenario(sc, output=ckpt, overwrite=True, inputs=[case / "sub" / ".." / "kept.npz"])


def test_export_plot_and_ensemble_refuse_their_inputs(case, bend):
    result = bend[1]
    assert refused(invoke(["export", result, result, "--overwrite"], case), 2, "is the input")
    figures = case / "figs"
    figures.mkdir()
    (figures / "plume.gif").symlink_to(result)
    refused(invoke(["plot", result, "--outdir", figures], case), 2, "plume.gif", str(result))
    ensemble = SCENARIO + "\n[ensemble]\nmembers = 2\n"
    (case / "bend.toml").write_text(ensemble)
    result = invoke(["ensemble", "bend.toml", "-q", "--no-plot", "-o", "bend.nc"], case)
    refused(result, 2, "is the input file")
    assert sha(case / "bend.nc") == sha(bend[0] / "bend.nc")


def test_twin_a_distinct_output_is_written(case):
    # the refusals above are not refusals of every name: another name is written
    result = invoke(["run", "bend.toml", "-q", "--no-plot", "-o", "other.nc"], case)
    assert result.exit_code == 0, result.output
    assert (case / "other.nc").is_file()


# --------------------------------------------------------------------------------------------
# 2. damaged and truncated flow files
# --------------------------------------------------------------------------------------------

DAMAGE = [  # variable, frame, (exit code, what the message names)
    ("u", 2, (1, ["bend.nc", "'u'", FRAMES[2], "damaged or incomplete"])),
    ("v", 3, (1, ["bend.nc", "'v'", FRAMES[3], "damaged or incomplete"])),
    ("u", 4, (1, ["bend.nc", "'u'", FRAMES[4], "damaged or incomplete"])),
    ("u", 0, (1, ["bend.nc", "'u'", FRAMES[0], "damaged or incomplete"])),
    ("depth", None, (2, ["bend.nc", "'depth'", "damaged or incomplete"])),
    ("time", 2, (2, ["bend.nc", "damaged or incomplete"])),
    ("x", None, (2, ["bend.nc", "damaged or incomplete"])),
]


@pytest.mark.parametrize("name,frame,outcome", DAMAGE, ids=[f"{d[0]}{d[1]}" for d in DAMAGE])
def test_a_damaged_chunk_names_file_variable_and_frame(case, name, frame, outcome):
    code, parts = outcome
    damage(case / "bend.nc", frame_offset(case / "bend.nc", name, frame))
    result = invoke(["run", "bend.toml", "-q", "--no-plot", "-o", "out.nc"], case)
    refused(result, code, *parts)
    assert not (case / "out.nc").exists() and leftovers(case) == []


def test_a_damaged_frame_keeps_the_checkpoint_and_the_repaired_run_resumes(case, bend):
    """A run saved at 02:00 and stopped; the frame at 03:00 is then damaged. Continuing stops
    with the frame named and keeps the checkpoint; once repaired, the run goes on to the same
    bits as one never stopped."""
    flow, out = case / "bend.nc", case / "out.nc"
    sc = load_scenario(case / "bend.toml")
    ckpt = checkpoint.checkpoint_path(out)
    saver = checkpoint.Checkpointer(
        ckpt, checkpoint.run_fingerprint(sc, "fast"), 600.0, sc.output_interval, 25
    )

    def stop_at_two(state):
        saver(state)
        if state.next_output == 13:  # 02:00 is output 12
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_scenario(sc, output=out, on_output=stop_at_two)
    good = flow.read_bytes()
    offset = frame_offset(flow, "u", 3)
    damage(flow, offset)
    args = ["run", "bend.toml", "-q", "--no-plot", "-o", "out.nc", "--checkpoint-every", "10 min"]
    refused(invoke([*args, "--resume"], case), 1, "'u'", FRAMES[3], "damaged", "continue with")
    assert checkpoint.read_checkpoint_meta(ckpt)["next_output"] == 13  # the state at 02:00 kept
    damage(flow, offset)  # repaired: the same bytes and times as before the damage
    assert flow.read_bytes() == good
    assert invoke([*args, "--resume"], case).exit_code == 0
    same_numbers(bend[1], out)
    assert not ckpt.exists()


@pytest.mark.parametrize("fraction", [0.05, 0.3, 0.5, 0.7, 0.9, 0.999])
def test_a_truncated_flow_file_is_a_named_fault(case, fraction):
    flow = case / "bend.nc"
    os.truncate(flow, int(flow.stat().st_size * fraction))
    result = invoke(["run", "bend.toml", "-q", "--no-plot", "-o", "out.nc"], case)
    assert result.exit_code in (1, 2), result.output
    refused(result, result.exit_code, "bend.nc")
    assert not (case / "out.nc").exists() and leftovers(case) == []


def test_twin_the_undamaged_copy_runs_to_the_reference(case, bend):
    assert invoke(["run", "bend.toml", "-q", "--no-plot", "-o", "out.nc"], case).exit_code == 0
    same_numbers(bend[1], case / "out.nc")


# --------------------------------------------------------------------------------------------
# 3. a full disk and a read-only folder
# --------------------------------------------------------------------------------------------


@pytest.fixture
def small_disk(tmp_path):
    """A 160 kB tmpfs when the test may mount one (root), else None: the caller simulates."""
    folder = tmp_path / "disk"
    folder.mkdir()
    mounted = os.geteuid() == 0 and shutil.which("mount") is not None
    if mounted:
        done = subprocess.run(
            ["mount", "-t", "tmpfs", "-o", "size=160k", "tmpfs", str(folder)],
            capture_output=True,
            timeout=30,
        )
        mounted = done.returncode == 0
    print(f"full-disk tests: {'a real tmpfs of 160 kB' if mounted else 'simulated write errors'}")
    yield folder if mounted else None
    if mounted:
        subprocess.run(["umount", "-l", str(folder)], timeout=30, check=False)


def fill(folder: Path, leave: int) -> None:
    """Fill ``folder``'s file system until about ``leave`` bytes are free."""
    free = shutil.disk_usage(folder).free
    with open(folder / "ballast", "wb") as fh:
        fh.write(b"\0" * max(0, free - leave))


def test_a_disk_too_small_is_refused_before_writing_and_the_old_output_is_kept(
    case, small_disk, monkeypatch
):
    folder = small_disk or case
    old = folder / "out.nc"
    old.write_bytes(b"the previous result")
    if small_disk is not None:
        fill(folder, 20_000)
    else:
        monkeypatch.setattr("walkers.files.free_bytes", lambda _: 20_000)
    result = invoke(["run", "bend.toml", "-q", "--no-plot", "-o", old, "--overwrite"], case)
    refused(result, 1, str(old), "are free", "Nothing was written")
    assert old.read_bytes() == b"the previous result"
    assert leftovers(folder) == []


def test_a_disk_that_fills_while_writing_is_a_named_fault(case, small_disk, monkeypatch):
    folder = small_disk or case
    old = folder / "out.nc"
    old.write_bytes(b"the previous result")
    monkeypatch.setattr(writer, "estimated_bytes", lambda data: 1)  # pass the check before
    if small_disk is not None:
        fill(folder, 8_000)
    else:
        real = xr.Dataset.to_netcdf

        def full(self, target, *args, **kwargs):
            real(self, target, *args, **kwargs)
            raise OSError(errno.ENOSPC, "No space left on device (simulated)")

        monkeypatch.setattr(xr.Dataset, "to_netcdf", full)
    result = invoke(["run", "bend.toml", "-q", "--no-plot", "-o", old, "--overwrite"], case)
    refused(result, 1, str(old), "the disk is full")
    assert old.read_bytes() == b"the previous result"
    assert leftovers(folder) == []


def test_a_full_disk_under_the_run_s_field_store_is_a_named_fault(small_disk, monkeypatch):
    """A run whose fields stream to a store on a full disk stops naming the store's folder."""
    from test_long_runs import small_run

    if small_disk is not None:
        folder = small_disk
        fill(folder, 4_000)
    else:
        folder = Path(os.environ.get("TMPDIR", "/tmp"))

        def full(*args, **kwargs):
            raise OSError(errno.ENOSPC, "No space left on device (simulated)")

        monkeypatch.setattr("walkers.run.store.netCDF4.Dataset", full)
    with pytest.raises(RunFailure, match="walkers-fields-.*the disk is full"):
        small_run("disk", folder)
    assert [p.name for p in folder.iterdir() if p.name.startswith("walkers-fields-")] == []


def test_a_folder_made_read_only_during_the_run_is_a_named_fault(case, small_disk, monkeypatch):
    """The folder turns read-only after the check before the run (os.access then said yes)."""
    folder = small_disk or case
    sc = load_scenario(case / "bend.toml")
    monkeypatch.setattr("walkers.files.os.access", lambda *a: True)

    def lock(done, total, in_water):
        if done >= total:  # the run is over; the writing is next
            if small_disk is not None:
                subprocess.run(["mount", "-o", "remount,ro", str(folder)], check=True, timeout=30)
            else:

                def refuse(self, target, *args, **kwargs):
                    raise OSError(errno.EROFS, "Read-only file system (simulated)", str(target))

                monkeypatch.setattr(xr.Dataset, "to_netcdf", refuse)

    with pytest.raises(RunFailure, match="cannot be written .*does not allow it") as failure:
        run_scenario(sc, output=folder / "out.nc", progress=lock)
    assert str(folder / "out.nc") in str(failure.value)
    assert not (folder / "out.nc").exists() and leftovers(folder) == []


def test_a_read_only_folder_is_refused_before_the_run(case, small_disk, monkeypatch):
    folder = small_disk or case
    if small_disk is not None:
        subprocess.run(["mount", "-o", "remount,ro", str(folder)], check=True, timeout=30)
    else:
        monkeypatch.setattr("walkers.files.os.access", lambda *a: False)
    result = invoke(["run", "bend.toml", "-q", "--no-plot", "-o", folder / "out.nc"], case)
    refused(result, 2, str(folder), "not writable")


# --------------------------------------------------------------------------------------------
# 4. SIGKILL at 20 points, each resumed
# --------------------------------------------------------------------------------------------

KILLS = 20
#: A process that loads walkers once, then for each output path read from stdin forks a child
#: that runs the scenario with a checkpoint at every output time; it prints each child's pid,
#: and "ended" when the child is gone. Numba's workqueue threading layer can be forked (GNU
#: OpenMP cannot), and a run's numbers do not depend on the threading layer.
ZYGOTE = """
import os, sys
from walkers.api import run_scenario
from walkers.run import checkpoint
from walkers.scenario.load import load_scenario

sc = load_scenario(sys.argv[1])
run_scenario(sc, output=sys.argv[2])  # the compiled kernels loaded once, before any fork
print("ready", flush=True)
for line in sys.stdin:
    out = line.strip()
    pid = os.fork()
    if pid == 0:
        code = 1
        try:
            saver = checkpoint.Checkpointer(
                checkpoint.checkpoint_path(out),
                checkpoint.run_fingerprint(sc, "fast"),
                600.0,
                sc.output_interval,
                25,
            )
            run_scenario(sc, output=out, on_output=saver)
            code = 0
        finally:
            os._exit(code)
    print(pid, flush=True)
    os.waitpid(pid, 0)
    print("ended", flush=True)
"""


def wait_for_output(ckpt: Path, target: int, zygote: subprocess.Popen) -> None:
    """Until the checkpoint holds output ``target`` (or 60 s pass)."""
    deadline = time.monotonic() + 60.0
    while time.monotonic() < deadline and zygote.poll() is None:
        if ckpt.exists():
            try:
                if checkpoint.read_checkpoint_meta(ckpt)["next_output"] >= target:
                    return
            except (InputError, OSError, KeyError, ValueError):
                pass  # being replaced right now
        time.sleep(0.002)


def test_sigkill_at_20_points_then_resume_gives_the_same_bits(case, bend):
    rng = np.random.default_rng(20261202)
    targets = rng.integers(1, 24, size=KILLS)  # kill once this output is saved ...
    delays = rng.uniform(0.0, 0.03, size=KILLS)  # ... and this many seconds later
    sc = load_scenario(case / "bend.toml")
    fingerprint = checkpoint.run_fingerprint(sc, "fast")
    env = {**os.environ, "NUMBA_THREADING_LAYER": "workqueue", "NUMBA_NUM_THREADS": "1"}
    zygote = subprocess.Popen(
        [sys.executable, "-c", ZYGOTE, str(case / "bend.toml"), str(case / "warm.nc")],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
        env=env,
    )
    assert zygote.stdin is not None and zygote.stdout is not None
    outcomes = []
    try:
        assert zygote.stdout.readline().strip() == "ready"
        for n, (target, delay) in enumerate(zip(targets, delays, strict=True)):
            out = case / f"kill{n}.nc"
            ckpt = checkpoint.checkpoint_path(out)
            zygote.stdin.write(f"{out}\n")
            zygote.stdin.flush()
            child = int(zygote.stdout.readline())
            wait_for_output(ckpt, int(target), zygote)
            time.sleep(delay)
            try:
                os.kill(child, signal.SIGKILL)  # the run this test asked for, by its id
            except ProcessLookupError:
                pass  # it had finished
            assert zygote.stdout.readline().strip() == "ended"
            if out.exists():
                outcomes.append("finished first")
            else:
                state = checkpoint.load_checkpoint(ckpt, fingerprint)
                outcomes.append(f"resumed from output {state.next_output}")
                run_scenario(sc, output=out, resume=state)
                checkpoint.remove_checkpoint(ckpt)
            same_numbers(bend[1], out)
    finally:
        zygote.stdin.close()
        zygote.wait(timeout=60)
    print("SIGKILL campaign:", outcomes)
    assert sum(o.startswith("resumed") for o in outcomes) >= KILLS // 2


# --------------------------------------------------------------------------------------------
# 5. a flow file replaced while the run reads it
# --------------------------------------------------------------------------------------------


def test_a_flow_file_replaced_during_the_run_is_refused(case):
    sc = load_scenario(case / "bend.toml")
    other = case / "other.nc"
    ff.write_flow(other, land=ff.island, depth=9.0)

    def replace_midway(done, total, in_water):
        if other.exists() and done >= total / 2:
            os.replace(other, case / "bend.nc")

    with pytest.raises(RunFailure, match="changed while the run was reading it"):
        run_scenario(sc, output=case / "out.nc", progress=replace_midway)
    assert not (case / "out.nc").exists()


def test_twin_an_untouched_flow_file_passes_the_check(case):
    # the scenario file, read once before the run, may be edited meanwhile
    sc = load_scenario(case / "bend.toml")

    def edit_scenario(done, total, in_water):
        with open(case / "bend.toml", "a") as fh:
            fh.write("# edited during the run\n")

    run_scenario(sc, output=case / "out.nc", progress=edit_scenario)
    assert (case / "out.nc").exists()
