"""Restart files: save a run's state at output times, and continue from it after an interruption.

A checkpoint holds everything :func:`walkers.run.simulate.simulate` needs to go on (a
:class:`~walkers.run.simulate.RunState`): the particle arrays, the owner of each particle, the index
of the next output time and the reductions recorded so far, plus a fingerprint of the run (the
scenario text, seed, stepper, walkers version and the size and modification time of every flow
file). The random numbers of a step are a hash of (run key, particle, step index), so a run
continued from an exactly restored state gives bitwise the same result as one never interrupted.

Files: ``<output>.checkpoint.npz`` beside the output (numpy's npz, read without pickles), written
to ``.<output>.checkpoint.npz.part`` and renamed with :func:`os.replace`, so a crash mid-write
leaves the previous checkpoint whole. The command line removes it after a successful run.

A run whose fields are streamed to disk (:class:`walkers.run.store.DiskFields`) keeps them out of
the npz: the segment files of the output times done so far are closed and placed in the folder
``<checkpoint>.fields/`` beside it (:func:`fields_folder`) before the npz that lists them (name,
output times, size) is written, so the npz only ever lists complete files. After each save the
folder holds exactly the segments the npz lists; :func:`remove_checkpoint` removes it too.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import zipfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

import walkers
from walkers.engine.state import ParticleState
from walkers.errors import InputError
from walkers.files import interrupts_held
from walkers.run.accumulate import _Accumulator
from walkers.run.simulate import RunState
from walkers.run.store import DiskFields
from walkers.scenario.specs import Scenario

#: Version of the checkpoint layout; a file of another version is refused. 2: fields may be on
#: disk beside the npz; the running maximum of the concentration is saved.
FORMAT = 2
_SEGMENT_FILE = re.compile(r"fields_\d+\.nc")
_PARTICLE = "particle."
_RESULT = "result."


def checkpoint_path(output: str | os.PathLike) -> Path:
    """The checkpoint file of a run writing ``output``: ``<output>.checkpoint.npz``."""
    output = Path(output)
    return output.with_name(output.name + ".checkpoint.npz")


def _temporary(path: Path) -> Path:
    return path.with_name(f".{path.name}.part")


def fields_folder(path: str | os.PathLike) -> Path:
    """The folder of the field segments of checkpoint ``path``: ``<path>.fields``."""
    path = Path(path)
    return path.with_name(path.name + ".fields")


def run_fingerprint(scenario: Scenario, stepper: str) -> dict[str, Any]:
    """What must not change between an interrupted run and its continuation.

    Keys: ``scenario_sha256`` (SHA-256 of the scenario text; of ``repr`` for a scenario given as
    a dict), ``seed``, ``stepper``, ``walkers_version`` and ``flow_files`` (path, bytes,
    modification time in ns, for each flow file).
    """
    text = scenario.text if scenario.text is not None else repr(scenario)
    files = []
    for p in scenario.flow.paths:
        st = Path(p).stat()
        files.append([str(p), int(st.st_size), int(st.st_mtime_ns)])
    return {
        "scenario_sha256": hashlib.sha256(text.encode("utf-8")).hexdigest(),
        "seed": int(scenario.seed),
        "stepper": str(stepper),
        "walkers_version": walkers.__version__,
        "flow_files": files,
    }


def save_checkpoint(
    path: str | os.PathLike, state: RunState, fingerprint: dict[str, Any], when: str = ""
) -> Path:
    """Write ``state`` and ``fingerprint`` to ``path`` atomically; return the path.

    when : the simulated time of the state (ISO 8601), kept for messages.
    """
    path = Path(path)
    folder = fields_folder(path)
    meta: dict[str, Any] = {
        "format": FORMAT,
        "fingerprint": fingerprint,
        "next_output": int(state.next_output),
        "time": when,
        "fields": state.results.field_record(folder),
    }
    arrays: dict[str, Any] = {"meta": np.array(json.dumps(meta)), "owner": state.owner}
    arrays.update({_PARTICLE + k: v for k, v in state.particles.arrays().items()})
    arrays.update({_RESULT + k: v for k, v in state.results.arrays().items()})
    temp = _temporary(path)
    # a Ctrl-C or SIGTERM waits for the file to be whole (well under a second) and is raised
    # after it: the interrupted run then resumes from this checkpoint
    with interrupts_held():
        try:
            with open(temp, "wb") as fh:
                np.savez(fh, **arrays)
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(temp, path)
        finally:
            temp.unlink(missing_ok=True)
    listed = {seg[0] for seg in meta["fields"]["segments"]} if meta["fields"] else set()
    _prune(folder, listed)
    return path


def _prune(folder: Path, keep: set[str]) -> None:
    """Remove the field segments in ``folder`` not named in ``keep`` (left by an earlier run that
    stopped between placing a segment and saving the checkpoint that lists it); remove the folder
    if nothing is kept."""
    if not folder.is_dir():
        return
    for item in folder.iterdir():
        if item.name not in keep and (
            _SEGMENT_FILE.fullmatch(item.name) or item.name.endswith(".part")
        ):
            item.unlink(missing_ok=True)
    if not keep:
        shutil.rmtree(folder, ignore_errors=True)


def _differences(saved: dict[str, Any], now: dict[str, Any]) -> list[str]:
    out = []
    if saved.get("seed") != now["seed"]:
        out.append(f"the seed changed (was {saved.get('seed')}, now {now['seed']})")
    if saved.get("scenario_sha256") != now["scenario_sha256"]:
        out.append("the scenario text changed")
    if saved.get("stepper") != now["stepper"]:
        out.append(f"the stepper changed (was {saved.get('stepper')}, now {now['stepper']})")
    if saved.get("walkers_version") != now["walkers_version"]:
        out.append(
            f"walkers changed (was {saved.get('walkers_version')}, now {now['walkers_version']})"
        )
    if saved.get("flow_files") != now["flow_files"]:
        out.append("a flow file changed (its size or modification time differs)")
    return out


def read_checkpoint_meta(path: str | os.PathLike) -> dict[str, Any]:
    """The metadata of a checkpoint (format, fingerprint, next output, time)."""
    path = Path(path)
    try:
        with np.load(path, allow_pickle=False) as data:
            return json.loads(str(data["meta"]))
    except (OSError, ValueError, KeyError, zipfile.BadZipFile, json.JSONDecodeError) as err:
        raise InputError(
            f"checkpoint {str(path)!r} cannot be read ({type(err).__name__}: {err}); delete it "
            "and run again without --resume"
        ) from None


def load_checkpoint(path: str | os.PathLike, fingerprint: dict[str, Any]) -> RunState:
    """The run state saved in ``path``, if it was written for the run ``fingerprint`` describes.

    Raises InputError if the file is missing, damaged, of another format, or written for a run
    that differs (scenario text, seed, stepper, walkers version or flow files), saying what
    differs and what to do.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(
            f"--resume: no checkpoint {str(path)!r}; the run was not interrupted after a "
            "checkpoint (or finished). Run without --resume, with --checkpoint-every to be able "
            "to resume next time"
        )
    meta = read_checkpoint_meta(path)
    if meta.get("format") != FORMAT:
        raise InputError(
            f"checkpoint {str(path)!r} has layout {meta.get('format')!r}, this walkers reads "
            f"{FORMAT}; delete it and run again without --resume"
        )
    changed = _differences(meta.get("fingerprint", {}), fingerprint)
    if changed:
        raise InputError(
            f"checkpoint {str(path)!r} was written for a different run: {'; '.join(changed)}. "
            "A resumed run must match the interrupted one exactly: restore what changed, or "
            "delete the checkpoint and run again without --resume"
        )
    record = meta.get("fields")
    fields = DiskFields.from_record(record, fields_folder(path)) if record else None
    try:
        with np.load(path, allow_pickle=False) as data:
            particles = ParticleState(
                **{k[len(_PARTICLE) :]: data[k] for k in data.files if k.startswith(_PARTICLE)}
            )
            results = _Accumulator.from_arrays(
                {k[len(_RESULT) :]: data[k] for k in data.files if k.startswith(_RESULT)}, fields
            )
            owner = data["owner"]
    except (OSError, ValueError, KeyError, TypeError, zipfile.BadZipFile) as err:
        raise InputError(
            f"checkpoint {str(path)!r} is damaged ({type(err).__name__}: {err}); delete it and "
            "run again without --resume"
        ) from None
    return RunState(particles, owner, int(meta["next_output"]), results)


def remove_checkpoint(path: str | os.PathLike) -> None:
    """Remove a checkpoint, its field segments and any temporary file of it (after a
    successful run)."""
    path = Path(path)
    path.unlink(missing_ok=True)
    _temporary(path).unlink(missing_ok=True)
    _prune(fields_folder(path), set())


class Checkpointer:
    """An ``on_output`` callback of :func:`~walkers.run.simulate.simulate` that saves the run state
    every ``every`` seconds of simulated time (at the first output time at or after each).

    path : checkpoint file; fingerprint : from :func:`run_fingerprint`.
    every, output_interval : seconds of simulated time.
    outputs : number of output times of the run (no checkpoint is written after the last).
    time_of : ISO 8601 text of output index k, for messages (optional).

    ``last`` holds the ISO time (or output index) of the last checkpoint written, None before.
    """

    def __init__(
        self,
        path: str | os.PathLike,
        fingerprint: dict[str, Any],
        every: float,
        output_interval: float,
        outputs: int,
        time_of: Callable[[int], str] | None = None,
    ) -> None:
        if not (every > 0 and np.isfinite(every)):
            raise InputError(f"--checkpoint-every = {every!r} s: must be a time greater than 0")
        self.path = Path(path)
        self.fingerprint = fingerprint
        self.stride = max(1, int(np.ceil(every / output_interval - 1e-9)))
        self.outputs = int(outputs)
        self.time_of = time_of
        self.last: str | None = None

    def __call__(self, state: RunState) -> None:
        k = state.next_output - 1
        if k == 0 or k % self.stride != 0 or state.next_output >= self.outputs:
            return
        when = self.time_of(k) if self.time_of is not None else f"output {k}"
        save_checkpoint(self.path, state, self.fingerprint, when)
        self.last = when
