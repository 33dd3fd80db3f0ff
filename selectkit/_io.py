"""Atomic file writes: a reader never sees a half-written output file, nor half of a set of files."""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import tempfile
from pathlib import Path

__all__ = ["STAGING_NAME", "atomic_write_bytes", "atomic_write_text", "output_set"]

#: Hidden folder, inside an output folder, where the next set of outputs is written before it is moved in.
STAGING_NAME = ".selectkit-staging"
#: Written into the staging folder once every file of the set is there: the list of the set's files.
_READY_NAME = ".set-ready.json"


def atomic_write_bytes(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder and ``os.replace``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        # mkstemp makes the file private (0600); give it the mode a plain open() would.
        umask = os.umask(0)
        os.umask(umask)
        os.fchmod(fd, 0o666 & ~umask)
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path


def atomic_write_text(path, text: str, encoding: str = "utf-8") -> Path:
    """Text version of :func:`atomic_write_bytes`."""
    return atomic_write_bytes(path, text.encode(encoding))


def _sync_folder(folder: Path) -> None:
    """Make renames in ``folder`` durable (a no-op where folders cannot be opened, e.g. Windows)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _move_set_in(folder: Path, stage: Path) -> None:
    """Move the files a ready staging folder lists into ``folder``, then remove the staging folder.

    Idempotent: files already moved (by a commit that was killed half-way) are skipped, so running it again
    finishes the set.
    """
    names = json.loads((stage / _READY_NAME).read_text(encoding="utf-8"))["files"]
    for name in names:
        if (stage / name).exists():
            os.replace(stage / name, folder / name)
    _sync_folder(folder)
    shutil.rmtree(stage)
    _sync_folder(folder)


@contextlib.contextmanager
def output_set(folder):
    """Write several files into ``folder`` as one set: afterwards it holds the old set or the new one, whole.

    Inside the ``with`` block, write every file of the set into the yielded staging folder
    (``folder/.selectkit-staging``, on the same file system). When the block ends normally the staging
    folder is marked ready (a small list of its files) and each file is moved over its old version with
    ``os.replace``; then the staging folder is removed. When the block raises (a writer fails, the disk
    fills, Ctrl-C), the staging folder is deleted and ``folder`` keeps its previous files untouched.

    A process killed during the moves themselves (a window of a few renames) leaves the ready staging
    folder behind; the next ``output_set`` on the same folder first finishes those moves, so a later
    failure cannot leave a mixture either. A staging folder that was never marked ready is discarded.
    Files of ``folder`` that are not part of the set (a run store, the user's own files) are never touched.
    One writer per folder at a time is assumed (overnight jobs hold a lock for it).

    Yields
    ------
    Path
        The staging folder to write the set's files into.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    stage = folder / STAGING_NAME
    if (stage / _READY_NAME).is_file():
        _move_set_in(folder, stage)  # an earlier set was killed while moving in: finish it first
    elif stage.exists():
        shutil.rmtree(stage)  # an earlier set that never finished being written: not a set at all
    stage.mkdir()
    try:
        yield stage
        names = sorted(p.name for p in stage.iterdir() if p.is_file() and not p.name.startswith("."))
        atomic_write_text(stage / _READY_NAME, json.dumps({"files": names}) + "\n")
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    _move_set_in(folder, stage)
