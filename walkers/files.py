"""Files written safely: writable targets checked first, data flushed to disk, final names given
in one step (never replacing a file unless asked).
"""

from __future__ import annotations

import errno
import os
import shutil
import signal
import threading
import uuid
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

from walkers.errors import InputError, RunFailure

# --------------------------------------------------------------------------------------------
# atomic writing
# --------------------------------------------------------------------------------------------


def check_folder(folder: Path, what: str) -> None:
    """Raise InputError unless ``folder`` is an existing, writable directory."""
    if not folder.is_dir():
        raise InputError(f"{what} {str(folder)!r} does not exist; create it first")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"{what} {str(folder)!r} is not writable; choose another")


def same_file(a: str | os.PathLike, b: str | os.PathLike) -> bool:
    """True if ``a`` and ``b`` name one file: the same inode (hard and symbolic links, other
    spellings of the path) or, when either does not exist yet, the same resolved path."""
    try:
        return os.path.samefile(a, b)
    except OSError:
        return os.path.realpath(a) == os.path.realpath(b)


def refuse_inputs(target: str | os.PathLike, inputs: Iterable[str | os.PathLike]) -> None:
    """Raise InputError if ``target`` is one of ``inputs`` (by :func:`same_file`): an input of
    a run is never written over, with or without ``--overwrite``."""
    for source in inputs:
        if same_file(target, source):
            raise InputError(
                f"output file {str(target)!r} is the input file {str(source)!r} of this run "
                "(the same file, perhaps through a link or another spelling); inputs are never "
                "written over, with or without --overwrite: choose another output name"
            )


def check_target(path: Path, overwrite: bool, inputs: Iterable[str | os.PathLike] = ()) -> None:
    """Raise InputError if ``path`` cannot be written: no such or no writable directory, the file
    is one of ``inputs`` (never written over), or it exists and ``overwrite`` is false."""
    check_folder(path.parent, "output directory")
    refuse_inputs(path, inputs)
    if path.exists() and not overwrite:
        raise InputError(
            f"output file {str(path)!r} exists; pass --overwrite or choose another name"
        )


def _fsync_file(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return  # some platforms cannot open a directory; the rename itself is still atomic
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _place(temp: Path, final: Path, overwrite: bool) -> None:
    """Give ``temp`` the name ``final`` in one step; without ``overwrite`` never replace a file."""
    if overwrite:
        os.replace(temp, final)
        return
    try:
        os.link(temp, final)  # fails if ``final`` appeared meanwhile: no silent replacement
    except FileExistsError as exc:
        raise InputError(
            f"output file {str(final)!r} exists; pass --overwrite or choose another name"
        ) from exc
    except OSError as exc:
        if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV):
            raise
        if final.exists():
            raise InputError(
                f"output file {str(final)!r} exists; pass --overwrite or choose another name"
            ) from exc
        os.replace(temp, final)
        return
    temp.unlink()


@contextmanager
def _temporary_names(finals: list[Path]) -> Iterator[list[Path]]:
    """Temporary names beside each final name; every one is removed on the way out."""
    temps = [f.with_name(f".{f.name}.{uuid.uuid4().hex[:12]}.part") for f in finals]
    try:
        yield temps
    finally:
        for temp in temps:
            if os.path.lexists(temp):  # (a read-only folder refuses even to unlink a name it lacks)
                temp.unlink()


# --------------------------------------------------------------------------------------------
# a full disk, a folder that refuses writing
# --------------------------------------------------------------------------------------------

#: errno values of a write that failed for want of room or of permission, not for a defect.
NO_ROOM = {errno.ENOSPC, errno.EDQUOT, errno.EFBIG}
NO_PERMISSION = {errno.EACCES, errno.EPERM, errno.EROFS}


def free_bytes(folder: Path) -> int:
    """Bytes free for an ordinary user in ``folder``'s file system."""
    return int(shutil.disk_usage(folder).free)


def check_room(path: Path, need: int) -> None:
    """Raise RunFailure if the file system of ``path`` has fewer than ``need`` bytes free."""
    free = free_bytes(path.parent)
    if need > free:
        raise RunFailure(
            f"output file {str(path)!r}: about {_size(need)} are needed but only {_size(free)} "
            f"are free in {str(path.parent)!r}; free at least {_size(need - free)} there or "
            "choose another folder. Nothing was written"
        )


@contextmanager
def interrupts_held() -> Iterator[None]:
    """Within: Ctrl-C (SIGINT) and SIGTERM are held until the block ends, then delivered to the
    handlers they were held from (Python's Ctrl-C handler and ``walkers run``'s SIGTERM handler
    raise KeyboardInterrupt; an ignored signal stays ignored). For a file that must be written
    whole: an interrupt inside a library's writer can leave it unable to clean up, and its own
    error then hides the interrupt (zipfile under numpy.savez: "Can't close the ZIP file while
    there is an open writing handle"). Only the main thread receives signals; elsewhere the
    block runs as it is."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    held: list[int] = []

    def hold(signum, _frame):
        held.append(signum)

    previous = {s: signal.signal(s, hold) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, handler)
    for signum in dict.fromkeys(held):
        signal.raise_signal(signum)


@contextmanager
def failures_named(path: Path, need: int) -> Iterator[None]:
    """Within: a write to ``path`` (about ``need`` bytes) that fails for want of room or
    permission raises the RunFailure of :func:`write_failure`; other errors pass unchanged."""
    try:
        yield
    except (OSError, RuntimeError) as exc:  # netCDF reports a full disk as a RuntimeError
        failure = write_failure(exc, path, need)
        if failure is None:
            raise
        raise failure from exc


def write_failure(exc: BaseException, path: Path, need: int) -> RunFailure | None:
    """The RunFailure of a write to ``path`` that failed for want of room or permission (from the
    error's errno; when the library reports none or "permission denied", as netCDF and HDF5 may
    for a full disk, from the free space left: under ``need`` bytes, the disk is full); None for
    any other failure."""
    code = getattr(exc, "errno", None)
    free = free_bytes(path.parent)
    # HDF5 reports a file it could not create on a full disk as "permission denied"
    full = free < need and (code is None or code in NO_PERMISSION)
    if code in NO_ROOM or full:
        return RunFailure(
            f"{str(path)!r} cannot be written: the disk is full ({exc}); about {_size(need)} are "
            f"needed and {_size(free)} are free in {str(path.parent)!r}. Free space there or "
            "choose another folder; nothing was written under the output name"
        )
    if code in NO_PERMISSION:
        return RunFailure(
            f"{str(path)!r} cannot be written ({exc}); the folder "
            f"{str(path.parent)!r} does not allow it: choose another or change its permissions. "
            "Nothing was written under the output name"
        )
    return None


def _size(n: int) -> str:
    """A byte count for people: kB, MB or GB (SI prefixes)."""
    for unit, scale in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if abs(n) >= scale:
            return f"{n / scale:.3g} {unit}"
    return f"{n} bytes"
