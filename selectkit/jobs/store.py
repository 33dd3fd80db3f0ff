"""The run store: one SQLite file in a job's output folder that survives a kill.

The store records the job's settings, a fingerprint of its data file, every
finished work unit (key, result, time), the pooled search results, the
shortlist and a log.  Each finished unit is committed in its own transaction
(WAL journal), so a job killed at any moment loses at most the unit it was
computing.  A lock file beside the store (``fcntl.flock``; released by the
operating system when the process dies) keeps a second process from running
the same store at once.

Each unit's stored bytes carry a SHA-256 checksum (of the unit's key and its
stored bytes), checked whenever units are read back: a unit whose bytes no
longer match is marked ``damaged`` and run again by the next resume instead of
being trusted.  SQLite's own errors (a damaged page) are reported as one line
that says what can be recovered and how (:func:`damaged_store_error`).

Results are stored as data only (JSON and numpy arrays, :mod:`selectkit._datafile`),
never as pickles, so opening a store received from someone else runs none of
its contents: a unit whose bytes are not such data is treated like a damaged
one (run again), and a store made by an older selectkit, which pickled its
units, is refused with the way to start afresh.
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3
import time
from pathlib import Path

from .. import _datafile
from ..errors import StoreBusyError, StoreError

__all__ = ["RunStore", "StoreLock", "STORE_NAME", "data_fingerprint", "find_store", "is_running",
           "unit_checksum", "damaged_store_error", "move_aside"]

STORE_NAME = "run-store.sqlite"
_LOCK_SUFFIX = ".lock"
#: 1: units and pooled results pickled (refused now); 2: stored as data only (selectkit._datafile)
SCHEMA_VERSION = 2
_PICKLED_SCHEMA = 1
_UNIT_FORMAT = ("selectkit-unit", 1)
_FOUND_FORMAT = ("selectkit-found", 1)
_FINISH_FORMAT = ("selectkit-finish", 1)
_TABLES = ("about", "units", "pooled", "shortlist", "log")

#: Finishing stages kept for a resume (ranking, stability, honest error); also made on opening a store
#: that predates them.
_FINISHING_TABLE = """CREATE TABLE IF NOT EXISTS finishing (
    stage TEXT PRIMARY KEY,
    basis TEXT NOT NULL,
    result BLOB NOT NULL,
    checksum TEXT NOT NULL,
    seconds REAL
)"""

_SCHEMA = """
CREATE TABLE IF NOT EXISTS about (name TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS units (
    key TEXT PRIMARY KEY,
    position INTEGER NOT NULL,
    state TEXT NOT NULL,
    result BLOB,
    models INTEGER,
    seconds REAL,
    finished_at REAL,
    checksum TEXT
);
CREATE TABLE IF NOT EXISTS pooled (
    position INTEGER PRIMARY KEY,
    method TEXT NOT NULL,
    models INTEGER NOT NULL,
    evaluated INTEGER NOT NULL,
    exact INTEGER NOT NULL,
    stopped_by TEXT NOT NULL,
    found BLOB NOT NULL
);
CREATE TABLE IF NOT EXISTS shortlist (position INTEGER PRIMARY KEY, row TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS log (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    at REAL NOT NULL,
    level TEXT NOT NULL,
    message TEXT NOT NULL
);
""" + _FINISHING_TABLE + ";\n"




# --------------------------------------------------------------------------- helpers
def dumps(value, what=_UNIT_FORMAT) -> bytes:
    """The stored bytes of a unit's result (or, with ``what=_FOUND_FORMAT``, of a pooled ``Found``): data only."""
    kind, version = what
    return _datafile.dumps(value, kind=kind, version=version)


def loads(blob: bytes, what=_UNIT_FORMAT):
    """A unit's result back from its stored bytes; :class:`selectkit._datafile.RefusedData` when they are not
    such data (never unpickled)."""
    kind, version = what
    return _datafile.loads(blob, kind=kind, version=version)


def _pickled_store_error(path) -> StoreError:
    """The one line for a store made by an older selectkit, whose units are pickles (never opened)."""
    return StoreError(
        f"the run store {str(path)!r} was made by an older selectkit, which stored its units as pickles; this "
        f"selectkit never opens those (loading a pickle can run code), so it is not a usable run store: start "
        f"afresh with 'selectkit job run JOB.toml --fresh' (the old store is moved aside, not deleted)",
        path=str(path),
    )


def unit_checksum(key: str, blob: bytes) -> str:
    """SHA-256 (hex) of a unit's key and its stored bytes: what :meth:`RunStore.read_units` checks."""
    digest = hashlib.sha256(key.encode("utf-8"))
    digest.update(b"\0")
    digest.update(bytes(blob))
    return digest.hexdigest()


def damaged_store_error(path, err: BaseException) -> StoreError:
    """The one-line error for a run store SQLite cannot read (a damaged page, a truncated file)."""
    return StoreError(
        f"the run store {str(path)!r} is damaged ({type(err).__name__}: {err}); its finished units cannot be "
        f"trusted, but the job file and the data are untouched: start afresh with 'selectkit job run JOB.toml "
        f"--fresh' (the damaged store is moved aside, not deleted), or restore the folder from a backup and resume",
        path=str(path),
    )


def move_aside(store_path) -> Path:
    """Rename a damaged store (and its ``-wal``/``-shm`` files) to ``<name>.damaged-<time>``; return the new path."""
    store_path = Path(store_path)
    stamp = time.strftime("%Y%m%d-%H%M%S")
    target = store_path.with_name(f"{store_path.name}.damaged-{stamp}")
    for suffix in ("", "-wal", "-shm"):
        source = Path(str(store_path) + suffix)
        if source.exists():
            os.replace(source, Path(str(target) + suffix))
    return target


def data_fingerprint(path) -> dict:
    """SHA-256 of a file's bytes and its size: ``{"sha256": ..., "size": ...}``.

    For a table in several files (a folder or a glob), the digest runs over
    each file's path and its bytes, in name order, and the size is their
    total: adding, removing, renaming or changing a file changes it; then
    ``files`` also gives each file's own SHA-256 and size.
    """
    from ..parts import _files_of, is_parted_source

    digest = hashlib.sha256()
    size = 0
    parted = is_parted_source(path)
    files = _files_of(os.fspath(path)) if parted else [os.fspath(path)]
    each = {}
    for name in files:
        one = hashlib.sha256()
        if parted:
            digest.update(name.encode("utf-8") + b"\0")
        with open(name, "rb") as handle:
            for block in iter(lambda: handle.read(1 << 20), b""):
                digest.update(block)
                one.update(block)
                size += len(block)
        each[name] = [one.hexdigest(), os.path.getsize(name)]
    out = {"sha256": digest.hexdigest(), "size": size}
    if parted:
        out["files"] = each  # each file's own SHA-256 and size: what extending a job compares
    return out


def find_store(folder_or_store) -> Path:
    """The store file of an output folder (or the store file itself).

    Raises
    ------
    StoreError
        When there is no store there.
    """
    path = Path(folder_or_store).expanduser()
    candidate = path / STORE_NAME if path.is_dir() else path
    if not candidate.is_file():
        raise StoreError(
            f"no run store at {str(candidate)!r}; give the output folder of a job "
            f"(the [run] output of its job file), which holds {STORE_NAME}"
        )
    return candidate.resolve()


class StoreLock:
    """An exclusive OS-level lock on ``<store>.lock``, held while a job runs.

    The operating system drops the lock when the process ends, however it ends,
    so a killed job never leaves a stale lock behind.
    """

    def __init__(self, store_path):
        self.path = Path(str(store_path) + _LOCK_SUFFIX)
        self._handle = None

    def acquire(self, *, wait: float = 1.0) -> "StoreLock":
        """Take the lock, retrying for ``wait`` seconds; raise :class:`StoreBusyError` if another holds it."""
        self.path.parent.mkdir(parents=True, exist_ok=True)
        handle = open(self.path, "a+")
        deadline = time.monotonic() + wait
        while True:
            if _try_lock(handle, exclusive=True):
                break
            if time.monotonic() >= deadline:
                handle.close()
                holder = _read_holder(self.path)
                raise StoreBusyError(
                    f"the run store {str(self.path)[: -len(_LOCK_SUFFIX)]!r} is in use by another job{holder}; "
                    f"wait for it to end (see 'selectkit job status') or choose another output folder"
                )
            time.sleep(0.05)
        handle.seek(0)
        handle.truncate()
        handle.write(f"{os.getpid()} {time.time():.0f}\n")
        handle.flush()
        self._handle = handle
        return self

    def release(self) -> None:
        if self._handle is not None:
            _unlock(self._handle)
            self._handle.close()
            self._handle = None

    def __enter__(self):
        return self.acquire()

    def __exit__(self, *exc):
        self.release()


def _try_lock(handle, *, exclusive: bool) -> bool:
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows
        import msvcrt

        try:
            handle.seek(0)
            msvcrt.locking(handle.fileno(), msvcrt.LK_NBLCK, 1)
            return True
        except OSError:
            return False
    flag = fcntl.LOCK_EX if exclusive else fcntl.LOCK_SH
    try:
        fcntl.flock(handle.fileno(), flag | fcntl.LOCK_NB)
        return True
    except BlockingIOError:
        return False


def _unlock(handle) -> None:
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows
        import msvcrt

        handle.seek(0)
        msvcrt.locking(handle.fileno(), msvcrt.LK_UNLCK, 1)
        return
    fcntl.flock(handle.fileno(), fcntl.LOCK_UN)


def _read_holder(lock_path: Path) -> str:
    try:
        pid = lock_path.read_text().split()[0]
        return f" (process {pid})"
    except (OSError, IndexError):
        return ""


def is_running(store_path) -> bool:
    """Whether some process holds the store's lock right now (a job is running)."""
    lock_path = Path(str(store_path) + _LOCK_SUFFIX)
    if not lock_path.exists():
        return False
    with open(lock_path, "a+") as handle:
        if _try_lock(handle, exclusive=False):
            _unlock(handle)
            return False
        return True


# --------------------------------------------------------------------------- the store
class RunStore:
    """Read and write a job's run store.

    Open it with :meth:`create_or_open` (read-write, by the job that holds the
    lock) or :meth:`open_read_only` (any other process, while a job runs).

    Parameters
    ----------
    path : Path
        The SQLite file.
    connection : sqlite3.Connection
    """

    def __init__(self, path: Path, connection: sqlite3.Connection, *, read_only: bool):
        self.path = Path(path)
        self._db = connection
        self.read_only = read_only

    # ------------------------------------------------------------------ opening
    @classmethod
    def create_or_open(cls, folder) -> "RunStore":
        """Open (creating if needed) the store in ``folder`` for writing."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / STORE_NAME
        try:
            db = sqlite3.connect(path, timeout=30.0, isolation_level=None)
            db.execute("PRAGMA journal_mode=WAL")
            # NORMAL: a commit survives the process being killed (not a power cut
            # between checkpoints), at a fraction of FULL's cost.
            db.execute("PRAGMA synchronous=NORMAL")
            db.executescript("BEGIN IMMEDIATE;" + _SCHEMA + "COMMIT;")  # all tables appear at once
        except sqlite3.DatabaseError as err:
            raise StoreError(f"{str(path)!r} is not a usable run store ({err}); start afresh with 'selectkit job "
                             f"run JOB.toml --fresh' (it is moved aside, not deleted), or choose another output "
                             f"folder") from err
        store = cls(path, db, read_only=False)
        try:
            columns = {row[1] for row in db.execute("PRAGMA table_info(units)")}
            if "checksum" not in columns:  # a store made before units carried checksums: units left unchecked
                db.execute("ALTER TABLE units ADD COLUMN checksum TEXT")
            version = store.get("schema_version")
        except sqlite3.DatabaseError as err:
            db.close()
            raise damaged_store_error(path, err) from err
        if version is None:
            store.set_many({"schema_version": SCHEMA_VERSION, "created_at": time.time()})
        elif int(version) == _PICKLED_SCHEMA:
            db.close()
            raise _pickled_store_error(path)
        elif int(version) != SCHEMA_VERSION:
            raise StoreError(f"{str(path)!r} was written by another version of selectkit (store version {version}, "
                             f"this one reads {SCHEMA_VERSION}); start it afresh in a new folder")
        return store

    @classmethod
    def open_read_only(cls, folder_or_store) -> "RunStore":
        """Open an existing store without writing to it (safe while a job runs)."""
        path = find_store(folder_or_store)
        try:
            db = sqlite3.connect(f"{path.as_uri()}?mode=ro", uri=True, timeout=30.0, isolation_level=None)
            tables = {name for (name,) in db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        except sqlite3.DatabaseError as err:
            raise StoreError(f"{str(path)!r} is not a readable run store ({err}); if it is a damaged one, start "
                             f"afresh with 'selectkit job run JOB.toml --fresh' (it is moved aside, not deleted)"
                             ) from err
        missing = set(_TABLES) - tables
        if missing:
            db.close()
            raise StoreError(f"{str(path)!r} is not a complete run store (no table {', '.join(sorted(missing))}); "
                             f"if a job is starting, try again in a moment")
        store = cls(path, db, read_only=True)
        try:
            version = store.get("schema_version")
        except sqlite3.DatabaseError as err:
            db.close()
            raise damaged_store_error(path, err) from err
        if version is not None and int(version) == _PICKLED_SCHEMA:
            db.close()
            raise _pickled_store_error(path)
        return store

    def close(self) -> None:
        """Close the connection (a read-write store stays locked until its :class:`StoreLock` is released)."""
        self._db.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # ------------------------------------------------------------------ about
    def get(self, name: str, default=None):
        """A value of the ``about`` table (decoded from JSON)."""
        row = self._db.execute("SELECT value FROM about WHERE name = ?", (name,)).fetchone()
        return default if row is None else json.loads(row[0])

    def set_many(self, values: dict) -> None:
        """Set several ``about`` values in one transaction."""
        with self._transaction():
            self._db.executemany(
                "INSERT INTO about (name, value) VALUES (?, ?) ON CONFLICT(name) DO UPDATE SET value = excluded.value",
                [(k, json.dumps(v, sort_keys=True, default=str)) for k, v in values.items()],
            )

    def about(self) -> dict:
        """Every ``about`` value: settings, data fingerprint, state, counts."""
        return {name: json.loads(value) for name, value in self._db.execute("SELECT name, value FROM about")}

    # ------------------------------------------------------------------ units
    def record_unit(self, key: str, result, *, models: int | None = None, seconds: float | None = None) -> None:
        """Commit one finished unit, with the checksum of its stored bytes, in its own transaction."""
        blob = dumps(result)
        with self._transaction():
            position = self._db.execute("SELECT count(*) FROM units").fetchone()[0]
            self._db.execute(
                "INSERT INTO units (key, position, state, result, models, seconds, finished_at, checksum) "
                "VALUES (?, ?, 'done', ?, ?, ?, ?, ?) ON CONFLICT(key) DO UPDATE SET result = excluded.result, "
                "state = 'done', models = excluded.models, seconds = excluded.seconds, "
                "finished_at = excluded.finished_at, checksum = excluded.checksum",
                (key, position, blob, models, seconds, time.time(), unit_checksum(key, blob)),
            )

    def read_units(self) -> tuple[dict, list[str]]:
        """``({key: result}, damaged keys)``: the finished units whose bytes pass their checksum, in the order
        they finished, and the keys of those that do not (or whose bytes are not a stored unit: they are
        never unpickled, whatever they hold).

        A read-write store marks the damaged units ``damaged``: they no longer
        count as finished, so a resume runs them again.
        """
        good, damaged = {}, []
        rows = self._db.execute("SELECT key, result, checksum FROM units WHERE state = 'done' ORDER BY position")
        for key, blob, checksum in rows.fetchall():
            if blob is None or (checksum is not None and unit_checksum(key, blob) != checksum):
                damaged.append(key)
                continue
            try:
                good[key] = loads(blob)
            except _datafile.RefusedData:  # not data this selectkit wrote (a pickle, damaged bytes): run again
                damaged.append(key)
        if damaged and not self.read_only:
            with self._transaction():
                self._db.executemany("UPDATE units SET state = 'damaged' WHERE key = ?", [(k,) for k in damaged])
        return good, damaged

    def verify_units(self) -> list[str]:
        """Keys of the finished units whose stored bytes fail their checksum (marked ``damaged`` when writable)."""
        damaged = []
        for key, blob, checksum in self._db.execute(
                "SELECT key, result, checksum FROM units WHERE state = 'done' ORDER BY position").fetchall():
            if blob is None or (checksum is not None and unit_checksum(key, blob) != checksum):
                damaged.append(key)
        if damaged and not self.read_only:
            with self._transaction():
                self._db.executemany("UPDATE units SET state = 'damaged' WHERE key = ?", [(k,) for k in damaged])
        return damaged

    def finished_units(self) -> dict:
        """``{key: result}`` of every finished unit that passes its checksum, in the order they finished
        (see :meth:`read_units` for the damaged ones)."""
        return self.read_units()[0]

    def finished_keys(self) -> set:
        """Keys of the finished units."""
        return {key for (key,) in self._db.execute("SELECT key FROM units WHERE state = 'done'")}

    def unit_times(self) -> list[tuple[str, float | None, float | None]]:
        """``(key, seconds it took, Unix time it finished)`` of each finished unit, in finishing order."""
        return list(self._db.execute(
            "SELECT key, seconds, finished_at FROM units WHERE state = 'done' ORDER BY position"))

    def unit_counts(self) -> tuple[int, int]:
        """(units finished, models evaluated by them as far as recorded)."""
        done, models = self._db.execute(
            "SELECT count(*), coalesce(sum(models), 0) FROM units WHERE state = 'done'").fetchone()
        return int(done), int(models)

    def clear(self) -> None:
        """Forget every unit, pooled result, shortlist row and setting (a fresh start)."""
        with self._transaction():
            for table in ("units", "pooled", "shortlist", "log"):
                self._db.execute(f"DELETE FROM {table}")
            self._db.execute(_FINISHING_TABLE)
            self._db.execute("DELETE FROM finishing")
            self._db.execute("DELETE FROM about WHERE name != 'schema_version'")
            self._db.execute("INSERT OR REPLACE INTO about VALUES ('created_at', ?)", (json.dumps(time.time()),))

    def forget_searches(self) -> None:
        """Forget the units, pooled results, shortlist and ranking, keeping each part's survey and moments and
        the candidates (``part-*`` and ``parts-setup`` of the finishing table): what extending a job needs."""
        with self._transaction():
            for table in ("units", "pooled", "shortlist"):
                self._db.execute(f"DELETE FROM {table}")
            self._db.execute(_FINISHING_TABLE)
            self._db.execute("DELETE FROM finishing WHERE stage NOT LIKE 'part-%' AND stage != 'parts-setup'")

    # ------------------------------------------------------------------ results
    def record_pooled(self, founds) -> None:
        """Replace the pooled search results (one row per method's ``Found``)."""
        with self._transaction():
            self._db.execute("DELETE FROM pooled")
            for i, found in enumerate(founds):
                self._db.execute(
                    "INSERT INTO pooled VALUES (?, ?, ?, ?, ?, ?, ?)",
                    (i, str(getattr(found, "method", "?")), len(found), int(getattr(found, "evaluated", 0)),
                     int(bool(getattr(found, "exact", False))), str(getattr(found, "stopped_by", "")),
                     dumps(found, _FOUND_FORMAT)),
                )

    def pooled(self) -> list:
        """The pooled search results (``Found`` values) of the last run that ended."""
        out = []
        for (blob,) in self._db.execute("SELECT found FROM pooled ORDER BY position").fetchall():
            try:
                out.append(loads(blob, _FOUND_FORMAT))
            except _datafile.RefusedData as err:
                raise StoreError(f"the pooled results in the run store {str(self.path)!r} are not data this "
                                 f"selectkit wrote ({err.reason}); run the job again to pool them afresh",
                                 path=str(self.path)) from err
        return out

    def pooled_summary(self) -> list[dict]:
        """Per search: method, models kept, models evaluated, exact or not, why it stopped."""
        rows = self._db.execute(
            "SELECT method, models, evaluated, exact, stopped_by FROM pooled ORDER BY position").fetchall()
        return [dict(method=m, models=n, evaluated=e, exact=bool(x), stopped_by=s) for m, n, e, x, s in rows]

    # ------------------------------------------------------------------ finishing
    def pooled_basis(self, settings_fingerprint: str) -> str:
        """SHA-256 of the pooled results and the settings: what a finishing stage was computed from."""
        digest = hashlib.sha256(settings_fingerprint.encode("utf-8"))
        for (blob,) in self._db.execute("SELECT found FROM pooled ORDER BY position").fetchall():
            digest.update(bytes(blob))
        return digest.hexdigest()

    def record_finished(self, stage: str, basis: str, value, *, seconds: float | None = None) -> None:
        """Keep a finishing stage's result (ranking, stability, honest error), data only, with its basis."""
        blob = dumps(value, _FINISH_FORMAT)
        with self._transaction():
            self._db.execute(_FINISHING_TABLE)
            self._db.execute("INSERT OR REPLACE INTO finishing VALUES (?, ?, ?, ?, ?)",
                             (stage, basis, blob, unit_checksum(stage, blob), seconds))

    def finished(self, stage: str, basis: str):
        """The stored result of a finishing stage computed from ``basis``; None when there is none (or it
        was computed from other pooled results or settings, or fails its checksum)."""
        try:
            row = self._db.execute("SELECT basis, result, checksum FROM finishing WHERE stage = ?",
                                   (stage,)).fetchone()
        except sqlite3.OperationalError:  # a store made before finishing was checkpointed
            return None
        if row is None or row[0] != basis or unit_checksum(stage, row[1]) != row[2]:
            return None
        try:
            return loads(row[1], _FINISH_FORMAT)
        except _datafile.RefusedData:
            return None

    def record_shortlist(self, rows: list[dict]) -> None:
        """Replace the stored shortlist (one JSON object per model, best first)."""
        with self._transaction():
            self._db.execute("DELETE FROM shortlist")
            self._db.executemany(
                "INSERT INTO shortlist VALUES (?, ?)",
                [(i, json.dumps(row, sort_keys=False, default=_json_default)) for i, row in enumerate(rows)],
            )

    def shortlist(self) -> list[dict]:
        """The stored shortlist rows, best first."""
        return [json.loads(r) for (r,) in self._db.execute("SELECT row FROM shortlist ORDER BY position")]

    # ------------------------------------------------------------------ log
    def log(self, message: str, level: str = "info") -> None:
        """Append a line to the store's log (its own transaction)."""
        with self._transaction():
            self._db.execute("INSERT INTO log (at, level, message) VALUES (?, ?, ?)", (time.time(), level, message))

    def log_lines(self, last: int | None = None) -> list[tuple[float, str, str]]:
        """``(Unix time, level, message)`` of every log line, or of the ``last`` ones."""
        if last is None:
            return list(self._db.execute("SELECT at, level, message FROM log ORDER BY id"))
        rows = self._db.execute("SELECT at, level, message FROM log ORDER BY id DESC LIMIT ?", (last,)).fetchall()
        return rows[::-1]

    # ------------------------------------------------------------------ internals
    def _transaction(self):
        if self.read_only:
            raise StoreError(f"the run store {str(self.path)!r} was opened read-only")
        return _Transaction(self._db)


class _Transaction:
    def __init__(self, db):
        self.db = db

    def __enter__(self):
        self.db.execute("BEGIN IMMEDIATE")
        return self.db

    def __exit__(self, kind, value, traceback):
        self.db.execute("COMMIT" if kind is None else "ROLLBACK")
        return False


def _json_default(value):
    import numpy as np

    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (set, frozenset, tuple)):
        return list(value)
    return str(value)
