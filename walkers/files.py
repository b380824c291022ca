"""Files written safely: writable targets checked first, data flushed to disk, final names given
in one step (never replacing a file unless asked).
"""

from __future__ import annotations

import errno
import os
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from walkers.errors import InputError

# --------------------------------------------------------------------------------------------
# atomic writing
# --------------------------------------------------------------------------------------------


def check_folder(folder: Path, what: str) -> None:
    """Raise InputError unless ``folder`` is an existing, writable directory."""
    if not folder.is_dir():
        raise InputError(f"{what} {str(folder)!r} does not exist; create it first")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"{what} {str(folder)!r} is not writable; choose another")


def check_target(path: Path, overwrite: bool) -> None:
    """Raise InputError if ``path`` cannot be written: no such or no writable directory, or the
    file exists and ``overwrite`` is false."""
    check_folder(path.parent, "output directory")
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
            temp.unlink(missing_ok=True)
