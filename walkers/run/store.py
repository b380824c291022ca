"""Where a run keeps its 3-D fields while it goes on: in memory, or streamed to temporary NetCDF
segment files on disk when they would take more than :data:`FIELD_MEMORY_BUDGET`.
"""

from __future__ import annotations

import errno
import math
import os
import shutil
import tempfile
import threading
import uuid
import weakref
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import dask
import dask.array
import netCDF4
import numpy as np

from walkers.errors import InputError
from walkers.files import _fsync_dir, _fsync_file, check_folder, failures_named

# --------------------------------------------------------------------------------------------
# field store: the 3-D fields of a run while it goes on
# --------------------------------------------------------------------------------------------

#: Bytes of 3-D output fields (all output times together) a run keeps in memory by default; a run
#: whose fields would take more streams them to disk (:class:`DiskFields`), so its memory does not
#: grow with its length. 16 MiB keeps every short run in memory (a day of half-hourly 60 x 120
#: maps of concentration and counts takes 0.5 MiB) and is small beside the few hundred MB a run
#: needs for the compiled kernels, the flow window and the particles.
FIELD_MEMORY_BUDGET = 16 * 2**20
FieldMode = Literal["auto", "memory", "disk"]
FIELD_MODES: tuple[FieldMode, ...] = ("auto", "memory", "disk")
#: One lock for every access to the stores' files: the HDF5 library may not be thread-safe.
_STORE_LOCK = threading.RLock()


class MemoryFields:
    """The 3-D fields (time, y, x) of a run held as numpy arrays (small runs).

    shape : (output times, ny, nx); variables : name -> dtype.
    """

    on_disk = False

    def __init__(self, shape: tuple[int, ...], variables: Mapping[str, Any]) -> None:
        self.shape = tuple(int(n) for n in shape)
        self.variables = {name: np.dtype(dtype) for name, dtype in variables.items()}
        self.arrays = {name: np.zeros(self.shape, dtype) for name, dtype in self.variables.items()}

    @classmethod
    def from_arrays(cls, arrays: Mapping[str, np.ndarray]) -> MemoryFields:
        """The store holding ``arrays`` (name -> array of shape (time, y, x)) as they are;
        KeyError if ``concentration`` is not among them."""
        store = cls.__new__(cls)
        store.shape = tuple(arrays["concentration"].shape)
        store.variables = {name: a.dtype for name, a in arrays.items()}
        store.arrays = dict(arrays)
        return store

    def put(self, k: int, fields: Mapping[str, np.ndarray]) -> None:
        """Store the fields of output time ``k``."""
        for name, values in fields.items():
            self.arrays[name][k] = values

    def data(self, name: str) -> np.ndarray:
        """The whole variable ``name`` (time, y, x)."""
        return self.arrays[name]

    def discard(self) -> None:
        """Nothing to remove: the arrays go with the store."""


@dataclass
class _Segment:
    """A file of consecutive output times [first, stop) of a disk store."""

    path: Path
    first: int
    stop: int


class _OpenFiles:
    """The files a disk store has open: the segment being written and the one last read."""

    def __init__(self) -> None:
        self.writer: netCDF4.Dataset | None = None
        self.reader: netCDF4.Dataset | None = None
        self.reader_path: Path | None = None

    def read(self, path: Path) -> netCDF4.Dataset:
        if self.reader_path != path:
            self.close_reader()
            nc = netCDF4.Dataset(path, "r")
            nc.set_auto_maskandscale(False)
            for var in nc.variables.values():
                _one_chunk_cache(var)
            self.reader, self.reader_path = nc, path
        assert self.reader is not None
        return self.reader

    def close_reader(self) -> None:
        if self.reader is not None:
            self.reader.close()
        self.reader, self.reader_path = None, None

    def close(self) -> None:
        self.close_reader()
        if self.writer is not None:
            self.writer.close()
            self.writer = None


def _one_chunk_cache(var: netCDF4.Variable) -> None:
    """Give ``var`` an HDF5 chunk cache of one chunk: each chunk of a store is written or read
    once, as a whole. The default (64 MiB per variable) would fill with chunks never used again,
    and a cache of 0 bytes made the memory of the HDF5 library grow by some 100 MB over the first
    few hundred chunks (measured with HDF5 2.2, netCDF-C 4.10)."""
    chunk = var.chunking()
    assert isinstance(chunk, list)
    var.set_var_chunk_cache(size=math.prod(chunk) * var.dtype.itemsize)


def _remove_store(files: _OpenFiles, folder: Path) -> None:
    with _STORE_LOCK:
        files.close()
    shutil.rmtree(folder, ignore_errors=True)


class DiskFields:
    """The 3-D fields (time, y, x) of a run streamed to NetCDF4 files, one output time at a time.

    The fields go to *segment* files ``fields_<first output>.nc``, each holding consecutive output
    times, one output time per chunk, zlib-compressed. The segment being written is closed
    ("sealed") when a checkpoint is taken (:meth:`hand_over`), so every segment a checkpoint lists
    is a complete file that a later crash cannot damage (HDF5 files open for writing can be).
    :meth:`data` reads the stored variables lazily with dask, one chunk per output time, so the
    fields are never all in memory.

    The segments live in a private temporary folder under ``folder`` (default: the system's
    temporary folder, which ``TMPDIR`` sets), removed with everything in it by :meth:`discard`,
    when the store is garbage-collected (after the last Dataset reading it is dropped) and at
    interpreter exit. Segments handed to a checkpoint live in the checkpoint's folder instead and
    are removed with it (:func:`walkers.run.checkpoint.remove_checkpoint`).

    shape : (output times, ny, nx); variables : name -> dtype.
    """

    on_disk = True

    def __init__(
        self,
        shape: tuple[int, ...],
        variables: Mapping[str, Any],
        folder: str | os.PathLike | None = None,
    ) -> None:
        self.shape = tuple(int(n) for n in shape)
        self.variables = {name: np.dtype(dtype) for name, dtype in variables.items()}
        if folder is not None:
            check_folder(Path(folder), "field store folder")
        self.folder = Path(tempfile.mkdtemp(prefix="walkers-fields-", dir=folder))
        #: Sealed segments in time order; then the one being written, if any.
        self.segments: list[_Segment] = []
        self.writing: _Segment | None = None
        #: Output times stored so far (always the first ``count``).
        self.count = 0
        self._files = _OpenFiles()
        self._remove = weakref.finalize(self, _remove_store, self._files, self.folder)

    def put(self, k: int, fields: Mapping[str, np.ndarray]) -> None:
        """Append the fields of output time ``k`` (the next one: ``k == count``)."""
        if k != self.count:
            raise ValueError(f"field store: output {k} given when output {self.count} is next")
        need = sum(int(np.asarray(values).nbytes) for values in fields.values())
        with _STORE_LOCK, failures_named(self.folder, need):
            # (a full disk or a folder that refuses writing is a named fault, not a defect)
            if self.writing is None:
                self._start_segment(k)
            assert self.writing is not None and self._files.writer is not None
            variables = self._files.writer.variables
            for name, values in fields.items():
                variables[name][k - self.writing.first] = values
            self.writing.stop = k + 1
        self.count = k + 1

    def _start_segment(self, first: int) -> None:
        path = self.folder / f"fields_{first:09d}.nc"
        nc = netCDF4.Dataset(path, "w", format="NETCDF4")
        nc.set_fill_off()
        nc.title = "walkers: temporary store of a run's fields (removed after the run)"
        nc.first_output = first
        _, ny, nx = self.shape
        nc.createDimension("time", None)
        nc.createDimension("y", ny)
        nc.createDimension("x", nx)
        for name, dtype in self.variables.items():
            # zlib level 1 without shuffle: the temporary store favours speed (a third less time
            # than with shuffle, for files 10 % larger); the final file is compressed harder
            var = nc.createVariable(
                name, dtype, ("time", "y", "x"), chunksizes=(1, ny, nx), zlib=True, complevel=1
            )
            _one_chunk_cache(var)
        self._files.writer = nc
        self.writing = _Segment(path, first, first)

    def seal(self) -> None:
        """Close the segment being written, so it is a complete file."""
        _, ny, nx = self.shape
        last = ny * nx * sum(dtype.itemsize for dtype in self.variables.values())  # bytes
        with _STORE_LOCK, failures_named(self.folder, last):  # the last output time's chunks
            if self._files.writer is not None:
                self._files.writer.close()
                self._files.writer = None
            if self.writing is not None:
                self.segments.append(self.writing)
                self.writing = None

    def hand_over(self, folder: Path) -> dict[str, Any]:
        """Seal, and place every segment in ``folder`` (a checkpoint's), flushed to disk.

        Segments in the store's own temporary folder are moved; segments of another checkpoint
        are copied (that checkpoint still lists them). Returns the record that
        :meth:`from_record` reads back: the shape, the variables' dtypes and, in time order, each
        segment's file name, first output, one past its last output, and size in bytes.
        """
        self.seal()
        folder.mkdir(exist_ok=True)
        with _STORE_LOCK:
            self._files.close_reader()
            for seg in self.segments:
                if seg.path.parent != folder:
                    target = folder / seg.path.name
                    _place_segment(seg.path, target, move=seg.path.parent == self.folder)
                    seg.path = target
        _fsync_dir(folder)
        return {
            "shape": list(self.shape),
            "variables": {name: dtype.str for name, dtype in self.variables.items()},
            "segments": [
                [s.path.name, s.first, s.stop, s.path.stat().st_size] for s in self.segments
            ],
        }

    @classmethod
    def from_record(
        cls, record: Mapping[str, Any], folder: Path, temporary: str | os.PathLike | None = None
    ) -> DiskFields:
        """The store a checkpoint describes (see :meth:`hand_over`), its segments in ``folder``;
        new segments go to a fresh temporary folder under ``temporary``.

        Raises InputError if a segment is missing or its size changed.
        """
        store = cls(tuple(record["shape"]), record["variables"], temporary)
        for name, first, stop, size in record["segments"]:
            path = folder / name
            if first != store.count or not path.is_file() or path.stat().st_size != size:
                store.discard()
                raise InputError(
                    f"checkpoint fields {str(path)!r}: missing or changed since the checkpoint "
                    "was saved; delete the checkpoint and run again without --resume"
                )
            store.segments.append(_Segment(path, int(first), int(stop)))
            store.count = int(stop)
        return store

    def data(self, name: str) -> dask.array.Array:
        """The stored variable ``name`` (time, y, x) as a lazy dask array, one chunk per output
        time, read from the segment files when computed. Seals the segment being written."""
        self.seal()
        _, ny, nx = self.shape
        dtype = self.variables[name]
        return dask.array.from_array(
            _StoredField(self, name),
            chunks=(1, ny, nx),
            name=f"walkers-field-{name}-{uuid.uuid4().hex}",
            meta=np.empty((0, 0, 0), dtype),
        )

    def read(self, name: str, key: tuple[slice, slice, slice]) -> np.ndarray:
        """Values of variable ``name`` at ``key`` (a slice per dimension, as dask asks)."""
        start, stop, step = key[0].indices(self.shape[0])
        blocks = [np.empty((0, *self.shape[1:]), self.variables[name])]
        with _STORE_LOCK:
            for seg in self.segments:
                lo, hi = max(start, seg.first), min(stop, seg.stop)
                if lo < hi:
                    var = self._files.read(seg.path).variables[name]
                    blocks.append(var[lo - seg.first : hi - seg.first])
        return np.concatenate(blocks)[::step, key[1], key[2]]

    def discard(self) -> None:
        """Close the files and remove the temporary folder with everything in it (segments
        handed to a checkpoint stay with it)."""
        self._remove()


class _StoredField:
    """One variable of a :class:`DiskFields` as the array-like that dask.array.from_array reads."""

    def __init__(self, store: DiskFields, name: str) -> None:
        self.store, self.name = store, name
        self.shape = store.shape
        self.dtype = store.variables[name]
        self.ndim = len(self.shape)

    def __getitem__(self, key: tuple[slice, slice, slice]) -> np.ndarray:
        return self.store.read(self.name, key)


def _place_segment(source: Path, target: Path, *, move: bool) -> None:
    """Give ``target`` the contents of ``source``, flushed to disk; remove ``source`` if
    ``move``. A rename where it can (same file system), else a copy to a temporary name and a
    rename, so ``target`` is never a partial file."""
    if move:
        try:
            os.replace(source, target)
        except OSError as exc:
            if exc.errno != errno.EXDEV:
                raise
        else:
            _fsync_file(target)
            return
    temp = target.with_name(f".{target.name}.part")
    try:
        shutil.copyfile(source, temp)
        _fsync_file(temp)
        os.replace(temp, target)
    finally:
        temp.unlink(missing_ok=True)
    if move:
        source.unlink()


def field_store(
    shape: tuple[int, ...],
    variables: Mapping[str, Any],
    mode: FieldMode = "auto",
    folder: str | os.PathLike | None = None,
) -> MemoryFields | DiskFields:
    """Where a run keeps its 3-D fields: in memory, or streamed to disk.

    shape : (output times, ny, nx); variables : name -> dtype.
    mode : ``"memory"``, ``"disk"``, or ``"auto"``: on disk when the fields of all output times
        would take more than :data:`FIELD_MEMORY_BUDGET` bytes (read when called).
    folder : where an on-disk store makes its temporary folder (default: the system's).
    """
    if mode not in FIELD_MODES:
        raise InputError(f"fields = {mode!r}: expected one of {', '.join(FIELD_MODES)}")
    if streams_to_disk(shape, variables, mode):
        return DiskFields(shape, variables, folder)
    return MemoryFields(shape, variables)


def streams_to_disk(
    shape: tuple[int, ...], variables: Mapping[str, Any], mode: FieldMode = "auto"
) -> bool:
    """Whether :func:`field_store` keeps fields of this shape (output times, ny, nx) and these
    variables (name -> dtype) on disk: always for ``"disk"``, never for ``"memory"``, and for
    ``"auto"`` when they would take more than :data:`FIELD_MEMORY_BUDGET` bytes."""
    nbytes = math.prod(shape) * sum(np.dtype(d).itemsize for d in variables.values())
    return mode == "disk" or (mode == "auto" and nbytes > FIELD_MEMORY_BUDGET)
