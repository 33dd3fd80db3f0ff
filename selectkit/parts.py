"""Tables read in parts: folders and globs of files, Dask DataFrames, and tables too big to hold whole.

The client never holds the rows of such a table.  Each pass below is one
task per part (a Parquet row group or file, a CSV file, a partition of a Dask
DataFrame, a slice of a large pandas DataFrame); on Dask the tasks run on the
workers and only summaries come back, merged in the order of the parts, so
the result does not depend on where or in what order the tasks ran.

1. **Survey.**  Each part counts its rows and, per column, the missing and
   infinite values, the range (with the rows that hold the smallest and
   largest value), the non-positive values and the levels of text columns.
   The merged counts are exact; the refusals (infinities, non-positive
   weights, missing values under ``incomplete_rows="refuse"``) name the part
   and its row.
2. **Sample.**  A seeded sample of ``check_sample_rows`` rows (every row when
   the table has no more), plus the rows holding each numeric column's
   smallest and largest value and the first row of each level.  With those
   rows in it, intake (:func:`selectkit.data.prepare`) and the candidate
   forms (:func:`selectkit.candidates.build_candidates`) see each column's
   whole range and every level, so domains (no log of a zero anywhere in
   the table), shifts, constants and levels are decided exactly; the
   reference level is the most frequent over all rows.  Fitted powers
   (Box-Cox, Yeo-Johnson, Box-Tidwell), the twin and VIF screens and the
   curvature test are decided on the sample, and a note says so.
3. **Moments.**  Every part builds the same candidate columns with the
   stored parameters and forms its centred cross-products, and those of each
   cross-validation fold: the fold of a row is fixed by a seeded hash of its
   position in the table (splitmix64), so one pass serves the CV errors too.
   The client merges them with the pairwise formula of
   :class:`selectkit.moments.Moments` (Chan, Golub & LeVeque 1979).
4. **Searches** then run on the moments as for a table in memory.
5. **Residual pass.**  PRESS of the shown models comes from one more pass
   that forms every such model's residuals and leverages at once, from the
   all-row fit (Allen 1974); the checks and figures use the random part of
   the sample, refitted there, and say so.

References
----------
Chan, T. F., Golub, G. H. and LeVeque, R. J. (1979). Updating formulae and a
    pairwise algorithm for computing sample variances. Stanford CS report 79-773.
Allen, D. M. (1974). The relationship between variable selection and data
    augmentation and a method for prediction. Technometrics 16(1), 125-127.
Steele, G. L., Lea, D. and Flood, C. H. (2014). Fast splittable pseudorandom
    number generators. OOPSLA 2014 (the splitmix64 finaliser).
"""

from __future__ import annotations

import glob as _glob
import os
from collections import Counter
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from . import _kept
from .errors import DataFileError, InputError, OptionError
from .settings import spell

__all__ = ["PART_ROWS", "AUTO_PARTS_ROWS", "LEVEL_CAP", "Part", "PartedTable", "PartsInfo", "open_parts",
           "wants_parts", "prepare_in_parts", "fold_labels", "row_ids", "kept_in", "table_exists"]

#: Rows per part when one Parquet file or a pandas DataFrame is cut into parts.
PART_ROWS = 262_144
#: With ``read_in_parts="auto"``, a table of at least this many rows is read in parts.
AUTO_PARTS_ROWS = 1_000_000
#: Distinct values of a text column a part counts before it stops (an identifier, not a factor).
LEVEL_CAP = 5_000
#: Rows per slice inside a part (the moments pass forms and merges fold moments slice by slice).
SLICE_ROWS = 65_536
#: Bytes of a block's widest temporary (see :func:`_slice_rows`): fewer rows a block for wide candidate sets.
SLICE_BYTES = 24 * 2**20
_PARQUET = (".parquet", ".pq")
_CSV = (".csv", ".txt", ".tsv", ".csv.gz", ".csv.bz2", ".csv.xz")


# ------------------------------------------------------------------------ the parts
@dataclass(frozen=True)
class Part:
    """One part of a table: where its rows are and how to name it in a message."""

    label: str
    kind: str  # "parquet", "csv", "frame", "dask"
    path: str | None = None
    row_groups: tuple = ()
    start: int = 0
    stop: int = 0
    rows: int | None = None  # known before reading (Parquet metadata, a DataFrame's slice), else None
    ident: str = ""  # the source's own name (a file relative to the table), the same on any machine
    first: int = 0  # the part's first row within that source


@dataclass
class PartedTable:
    """A table as a list of parts, and how to run a task on each."""

    parts: list
    description: str
    files: tuple = ()
    frame: object = None  # the pandas DataFrame that "frame" parts slice
    dask_frame: object = None

    def run(self, task, args_of, *, client=None, stage=None, basis_of=None, only=None) -> list:
        """``task(frame_of_part, *args_of(i))`` for every part (or the parts ``only``), results in part order.

        With ``stage`` and ``basis_of`` and a keeper installed
        (:func:`selectkit._kept.kept_in`, as a job's run store does), a part
        whose result is kept under its own name (``stage/ident@first``: its
        file and first row, so that it keeps its result when other files join
        the table) and ``basis_of(i)`` is not read again, and every other
        part's result is kept as soon as it arrives.
        """
        keeper = _kept.current() if stage is not None else None
        results: list = [None] * len(self.parts)
        todo = list(range(len(self.parts))) if only is None else list(only)

        def name(i):
            return f"{stage}/{self.parts[i].ident}@{self.parts[i].first}"

        if keeper is not None:
            bases = {i: basis_of(i) for i in todo}
            for i in list(todo):
                kept = keeper.get(name(i), bases[i])
                if kept is not None:
                    results[i] = kept
                    todo.remove(i)

        def arrived(i, value):
            results[i] = value
            if keeper is not None:
                keeper.put(name(i), bases[i], value)

        if todo:
            self._compute(task, args_of, todo, client, arrived)
        return results if only is None else [results[i] for i in only]

    def _compute(self, task, args_of, todo, client, arrived) -> None:
        """Run the parts ``todo`` here, on dask's local scheduler or on a distributed client."""
        if self.dask_frame is None and client is None:
            for i in todo:
                part = self.parts[i]
                arrived(i, _on_frame(task, part.label, _load(part, self.frame), args_of(i)))
            return
        import dask

        if self.dask_frame is not None:
            pieces = self.dask_frame.to_delayed()
            tasks = [dask.delayed(_on_frame)(task, self.parts[i].label, pieces[i], args_of(i)) for i in todo]
            client = client if client is not None else _current_client()
        else:
            tasks = [dask.delayed(_on_part)(task, self.parts[i], args_of(i)) for i in todo]
        if client is None:  # a Dask DataFrame on dask's local scheduler
            for i, value in zip(todo, dask.compute(*tasks)):
                arrived(i, value)
            return
        from distributed import as_completed

        futures = client.compute(tasks)
        where = {f.key: i for f, i in zip(futures, todo)}
        for future, value in as_completed(futures, with_results=True):
            arrived(where[future.key], value)


def _current_client():
    try:
        import distributed

        return distributed.default_client()
    except (ImportError, ValueError):
        return None


kept_in = _kept.kept_in
_basis = _kept.basis


def _on_part(task, part, args):
    return _on_frame(task, part.label, _load(part, None), args)


def _on_frame(task, label, frame, args):
    frame.columns = [str(c).strip() for c in frame.columns]
    try:
        return task(frame, *args)
    except InputError as err:
        raise InputError(f"{label}: {err}", **getattr(err, "context", {})) from err


def _load(part, frame):
    if part.kind == "frame":
        return frame.iloc[part.start:part.stop].reset_index(drop=True)
    if part.kind == "parquet":
        import pyarrow.parquet as pq

        try:
            handle = pq.ParquetFile(part.path, pre_buffer=False)
            table = handle.read_row_groups(list(part.row_groups)) if part.row_groups else handle.read()
        except (OSError, ValueError) as err:
            raise DataFileError(f"cannot read {part.label} as Parquet ({err}); check that the file is complete",
                                path=part.path) from err
        return table.to_pandas().reset_index(drop=True)
    from .data import read_table

    return read_table(part.path)[0]


def _is_dask_frame(data) -> bool:
    return type(data).__module__.startswith("dask") and hasattr(data, "to_delayed") and hasattr(data, "npartitions")


def _files_of(path: str) -> list[str]:
    if any(ch in path for ch in "*?["):
        found = sorted(p for p in _glob.glob(path, recursive=True) if os.path.isfile(p))
        if not found:
            raise DataFileError(f"no file matches {path!r}; check the pattern and the folder", path=path)
        return found
    if os.path.isdir(path):
        found = sorted(str(p) for p in Path(path).rglob("*")
                       if p.is_file() and not p.name.startswith((".", "_")) and p.name.lower().endswith(_PARQUET + _CSV))
        if not found:
            raise DataFileError(f"folder {path!r} holds no .parquet or .csv file; point at the folder of the "
                                f"table's files", path=path)
        return found
    return [path]


def _kind_of(path: str) -> str:
    lower = path.lower()
    if lower.endswith(_PARQUET):
        return "parquet"
    if lower.endswith(_CSV):
        return "csv"
    raise DataFileError(f"cannot tell the kind of {path!r} from its name; the parts of a table must be .parquet "
                        f"or .csv files", path=path)


def _parquet_parts(path: str, label: str, ident: str) -> list:
    import pyarrow.parquet as pq

    try:
        meta = pq.ParquetFile(path).metadata
    except (OSError, ValueError) as err:
        raise DataFileError(f"cannot read {label} as Parquet ({err}); check that the file is complete",
                            path=path) from err
    parts, group, rows, first = [], [], 0, 0
    for g in range(meta.num_row_groups):
        group.append(g)
        rows += meta.row_group(g).num_rows
        if rows >= PART_ROWS or g == meta.num_row_groups - 1:
            name = label if len(group) == meta.num_row_groups else f"{label} (rows {first + 1}-{first + rows})"
            parts.append(Part(name, "parquet", path, tuple(group), rows=rows, ident=ident, first=first))
            first += rows
            group, rows = [], 0
    return parts or [Part(label, "parquet", path, (), rows=0, ident=ident)]


def table_exists(path) -> bool:
    """Whether a table path names something to read: a file, a folder, or a glob matching a file."""
    path = os.fspath(path)
    if any(ch in path for ch in "*?["):
        return any(os.path.isfile(p) for p in _glob.iglob(path, recursive=True))
    return os.path.isfile(path) or os.path.isdir(path)


def is_parted_source(data) -> bool:
    """Whether ``data`` can only be read in parts: a folder, a glob or a Dask DataFrame."""
    if _is_dask_frame(data):
        return True
    if isinstance(data, (str, os.PathLike)):
        path = os.fspath(data)
        return os.path.isdir(path) or any(ch in path for ch in "*?[")
    return False


def table_rows(data) -> int | None:
    """Rows of a pandas DataFrame or a Parquet file, known without reading the rows (None otherwise)."""
    import pandas as pd

    if isinstance(data, pd.DataFrame):
        return len(data)
    if isinstance(data, (str, os.PathLike)):
        path = os.fspath(data)
        if os.path.isfile(path) and path.lower().endswith(_PARQUET):
            try:
                import pyarrow.parquet as pq

                return int(pq.ParquetFile(path).metadata.num_rows)
            except (ImportError, OSError, ValueError):
                return None
    return None


def wants_parts(data, read_in_parts: str) -> bool:
    """Whether a run reads ``data`` in parts under the ``read_in_parts`` setting."""
    if is_parted_source(data):
        if read_in_parts == "no":
            what = "a Dask DataFrame" if _is_dask_frame(data) else f"{os.fspath(data)!r}"
            raise OptionError(f"{what} is a table in several parts, which is only read in parts; drop "
                              f"{spell('read_in_parts', 'no')}, or pass one file or a pandas DataFrame")
        return True
    if read_in_parts == "yes":
        if not (table_rows(data) is not None):
            raise OptionError(f"{spell('read_in_parts', 'yes')} needs a Parquet file, a folder or glob of files, "
                              f"a pandas or a Dask DataFrame; a single CSV file is read whole — convert it to "
                              f"Parquet, or leave {spell('read_in_parts')} at auto")
        return True
    if read_in_parts == "auto":
        rows = table_rows(data)
        return rows is not None and rows >= AUTO_PARTS_ROWS
    return False


def open_parts(data) -> PartedTable:
    """The parts of a folder, a glob, a Parquet file, a Dask DataFrame or a pandas DataFrame."""
    import pandas as pd

    if _is_dask_frame(data):
        parts = [Part(f"partition {i + 1} of {data.npartitions}", "dask", ident=f"partition {i}")
                 for i in range(data.npartitions)]
        return PartedTable(parts, f"a Dask DataFrame in {data.npartitions} partitions", dask_frame=data)
    if isinstance(data, pd.DataFrame):
        n = len(data)
        if n == 0:
            raise InputError(f"the DataFrame has {data.shape[1]} columns but no data rows; pass a table with rows")
        parts = [Part(f"rows {a + 1}-{min(a + PART_ROWS, n)} of the DataFrame", "frame", start=a,
                      stop=min(a + PART_ROWS, n), rows=min(a + PART_ROWS, n) - a, first=a)
                 for a in range(0, n, PART_ROWS)]
        return PartedTable(parts, "a DataFrame", frame=data)
    path = os.fspath(data)
    if not any(ch in path for ch in "*?[") and not os.path.exists(path):
        raise DataFileError(f"data file or folder {path!r} does not exist; check the path", path=path)
    files = _files_of(path)
    kinds = {_kind_of(f) for f in files}
    if len(kinds) > 1:
        raise DataFileError(f"{path!r} mixes Parquet and CSV files; keep the parts of one table in one format",
                            path=path)
    parts = []
    root = path if os.path.isdir(path) else None
    for f in files:
        shown = os.path.join(os.path.basename(os.path.normpath(root)), os.path.relpath(f, root)) if root else f
        label = f"file {shown!r}"
        ident = os.path.relpath(f, root if root else os.path.dirname(path) or ".").replace(os.sep, "/")
        parts.extend(_parquet_parts(f, label, ident) if _kind_of(f) == "parquet"
                     else [Part(label, "csv", f, ident=ident)])
    return PartedTable(parts, path if len(files) == 1 else f"{path} ({len(files)} files)", files=tuple(files))


# ------------------------------------------------------------------------ pass 1: survey
def _survey(frame, offset=None, take=None):
    """Counts of one part: rows, and per column its missing and infinite values, range and levels.

    With ``take`` (table positions in this part, which starts at ``offset``)
    the part also returns those rows and the rows of its own extremes and
    first levels, so that the sample needs no pass of its own.
    """
    import pandas as pd

    out = {"n": len(frame), "columns": list(frame.columns), "cols": {}}
    for name in frame.columns:
        s = frame[name]
        info: dict = {}
        missing = s.isna().to_numpy()
        info["missing"] = int(missing.sum())
        info["first_missing"] = int(np.argmax(missing)) if info["missing"] else -1
        if pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype):
            x = s.to_numpy(dtype=np.float64, na_value=np.nan)
            finite = np.isfinite(x)
            if len(x) and finite.all():  # the usual column: no infinity; argmin/argmax need no NaN-free copy
                info.update(kind="number", inf=0, first_inf=-1)
                lo, hi = int(np.argmin(x)), int(np.argmax(x))  # = nanargmin/nanargmax here: first of each
                info.update(min=float(x[lo]), max=float(x[hi]), argmin=lo, argmax=hi)
                bad = x <= 0
            else:
                inf = np.isinf(x)
                info.update(kind="number", inf=int(inf.sum()), first_inf=int(np.argmax(inf)) if inf.any() else -1)
                if finite.any():
                    xs = np.where(finite, x, np.nan)
                    lo, hi = int(np.nanargmin(xs)), int(np.nanargmax(xs))
                    info.update(min=float(x[lo]), max=float(x[hi]), argmin=lo, argmax=hi)
                bad = finite & (x <= 0)
            info.update(nonpositive=int(bad.sum()), first_nonpositive=int(np.argmax(bad)) if bad.any() else -1)
        else:
            info["kind"] = "text"
            values = pd.Series(s.to_numpy()[~missing], index=np.flatnonzero(~missing), dtype=object)
            levels = None
            if values.nunique() <= LEVEL_CAP:
                counts = Counter(values.tolist())
                first = values.drop_duplicates()  # its index: the row where each level first appears
                levels = {v: (counts[v], int(i)) for i, v in zip(first.index, first.tolist())}
            info["levels"] = levels
        out["cols"][name] = info
    if take is not None:
        local = set()
        for info in out["cols"].values():
            if "argmin" in info:
                local.update((info["argmin"], info["argmax"]))
            if info.get("levels"):
                local.update(first for _, first in info["levels"].values())
        rows = np.union1d(np.asarray(take, dtype=np.int64) - offset, np.fromiter(local, np.int64, len(local)))
        out["rows"] = _take(frame, rows + offset, offset)
        out["take"] = np.asarray(take, dtype=np.int64)
    return out


@dataclass
class _Column:
    kind: str
    missing: int = 0
    first_missing: tuple | None = None  # (part, row)
    inf: int = 0
    first_inf: tuple | None = None
    nonpositive: int = 0
    first_nonpositive: tuple | None = None
    min: float = np.inf
    max: float = -np.inf
    argmin: int = -1  # global position
    argmax: int = -1
    levels: dict | None = field(default_factory=dict)  # value -> [count, first global position]


def _merge_surveys(table, surveys):
    """Exact totals over the parts (raises when the parts disagree on the columns)."""
    columns = surveys[0]["columns"]
    offsets = np.concatenate([[0], np.cumsum([s["n"] for s in surveys])]).astype(np.int64)
    merged: dict[str, _Column] = {}
    for p, (part, survey) in enumerate(zip(table.parts, surveys)):
        if survey["columns"] != columns:
            extra = [c for c in survey["columns"] if c not in columns]
            lacking = [c for c in columns if c not in survey["columns"]]
            what = (f"lacks {', '.join(map(repr, lacking[:5]))}" if lacking
                    else f"has {', '.join(map(repr, extra[:5]))} too" if extra else "has them in another order")
            if lacking or extra:
                raise InputError(f"{part.label} {what}; every part of the table needs the same columns as "
                                 f"{table.parts[0].label}", column=(lacking or extra)[0])
        base = int(offsets[p])
        for name, info in survey["cols"].items():
            col = merged.setdefault(name, _Column(info["kind"]))
            if col.kind != info["kind"]:
                col.kind = "mixed"
            for key in ("missing", "inf", "nonpositive"):
                count = info.get(key, 0)
                if count and getattr(col, key) == 0:
                    setattr(col, "first_" + key, (p, info["first_" + key]))
                setattr(col, key, getattr(col, key) + count)
            if "min" in info:
                if info["min"] < col.min:
                    col.min, col.argmin = info["min"], base + info["argmin"]
                if info["max"] > col.max:
                    col.max, col.argmax = info["max"], base + info["argmax"]
            if info["kind"] == "text":
                if info["levels"] is None or col.levels is None:
                    col.levels = None
                else:
                    for v, (c, first) in info["levels"].items():
                        if v in col.levels:
                            col.levels[v][0] += c
                        else:
                            col.levels[v] = [c, base + first]
                    if len(col.levels) > LEVEL_CAP:
                        col.levels = None
    return merged, offsets


def _where(table, offsets, at) -> str:
    p, row = at
    return f"{table.parts[p].label}, row {row + 1} of that part (row {int(offsets[p]) + row + 1} of the table)"


def _exact_refusals(table, offsets, merged, *, response, weights, pool, missing_policy):
    in_use = [response] + ([weights] if weights else []) + list(pool)
    infinite = [(c, merged[c]) for c in in_use if merged[c].inf]
    if infinite:
        name, col = infinite[0]
        listing = ", ".join(f"'{c}' ({k.inf} rows)" for c, k in infinite)
        raise InputError(f"infinite values in {listing}, the first at {_where(table, offsets, col.first_inf)}; "
                         f"replace them with finite values or blank them out as missing", column=name,
                         counts={c: k.inf for c, k in infinite})
    if weights and merged[weights].nonpositive:
        col = merged[weights]
        raise InputError(f"weights column '{weights}' has {col.nonpositive} values that are zero or negative, the "
                         f"first at {_where(table, offsets, col.first_nonpositive)}; weights must be positive — drop "
                         f"those rows or fix the weights", column=weights, count=col.nonpositive)
    holes = [(c, merged[c]) for c in in_use if merged[c].missing]
    if holes and missing_policy == "refuse":
        name, col = holes[0]
        listing = ", ".join(f"'{c}' ({k.missing} rows)" for c, k in holes)
        raise InputError(f"missing values in {listing}, the first at {_where(table, offsets, col.first_missing)}; "
                         f"give {spell('incomplete_rows', 'drop')} to drop those rows, or fill the values in first",
                         column=name, counts={c: k.missing for c, k in holes})


# ------------------------------------------------------------------------ pass 2: sample
def _take(frame, positions, offset):
    """Rows of one part at the given table positions, with a ``position`` index."""
    local = np.asarray(positions, dtype=np.int64) - offset
    rows = frame.iloc[local].copy()
    rows.index = np.asarray(positions, dtype=np.int64)
    return rows


def _random_positions(n_total: int, size: int, seed: int) -> np.ndarray:
    """The seeded sample of the checks: ``size`` table positions without replacement, sorted (all when fewer)."""
    if n_total <= size:
        return np.arange(n_total, dtype=np.int64)
    rng = np.random.default_rng(np.random.SeedSequence([int(seed), 0x5EED]))
    return np.sort(rng.choice(n_total, size=size, replace=False)).astype(np.int64)


def _sample_positions(n_total: int, size: int, seed: int, merged) -> tuple[np.ndarray, np.ndarray]:
    """(random rows, every row to read): the seeded sample, plus the rows of each extreme and first level."""
    random = _random_positions(n_total, size, seed)
    if n_total <= size:
        return random, random
    extra = set()
    for col in merged.values():
        if col.argmin >= 0:
            extra.update((col.argmin, col.argmax))
        if col.kind == "text" and col.levels:
            extra.update(first for _, first in col.levels.values())
    return random, np.union1d(random, np.fromiter(extra, dtype=np.int64, count=len(extra)))


# ------------------------------------------------------------------------ pass 3: moments
def _splitmix(x: np.ndarray) -> np.ndarray:
    z = x + np.uint64(0x9E3779B97F4A7C15)
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


def _repeat_keys(seed: int, repeats: int) -> list[int]:
    from .parallel import spawn_seeds

    return [int(c.generate_state(1, np.uint64)[0]) for c in spawn_seeds(seed, repeats)]


def row_ids(part, rows) -> np.ndarray:
    """The identity of rows of a part for the fold hash: its source's name hashed, plus the row within it.

    A row keeps its identity (and so its fold) whichever machine reads it,
    however the table is cut into parts, and when other files join the table.
    """
    import hashlib

    base = int.from_bytes(hashlib.sha256(part.ident.encode("utf-8")).digest()[:8], "little")
    with np.errstate(over="ignore"):
        return np.uint64(base) + np.uint64(part.first) + np.asarray(rows, dtype=np.uint64)


def fold_labels(positions, scheme, n_total: int, key: int) -> np.ndarray:
    """The fold of each row, from its identity (shuffled) or its position in the table (blocked).

    Shuffled K-fold: ``splitmix64(id + key) mod K`` for the row's
    :func:`row_ids`, where ``key`` comes from the repetition's child of
    ``SeedSequence(seed)`` (so any worker, reading any part, assigns a row
    to the same fold; fold sizes are then binomial about n/K, not equal).
    Blocked (time-ordered) K-fold: ``positions`` are places in the table,
    cut into the contiguous blocks of ``numpy.array_split``, as in memory.
    """
    positions = np.asarray(positions, dtype=np.uint64)
    if scheme.kind == "blocked":
        bounds = np.cumsum([n_total // scheme.k + (1 if i < n_total % scheme.k else 0) for i in range(scheme.k)])
        return np.searchsorted(bounds, positions.astype(np.int64), side="right").astype(np.int64)
    with np.errstate(over="ignore"):
        return (_splitmix(positions + np.uint64(key)) % np.uint64(scheme.k)).astype(np.int64)


def _complete(frame, pool) -> np.ndarray:
    """Rows of a part with a value in every column in use (the others are dropped, as intake drops them)."""
    keep = np.ones(len(frame), dtype=bool)
    for c in pool:
        keep &= ~frame[c].isna().to_numpy()
    return keep


def _slice_rows(width: int) -> int:
    """Rows of a block of ``width`` columns: at most :data:`SLICE_ROWS`, and about :data:`SLICE_BYTES` a block.

    The PRESS pass works in slices of this many rows, and the moments pass
    builds its candidate columns in blocks of it.  A block's temporaries then
    stay below glibc's largest mmap threshold (32 MB), so the allocator
    reuses them from one block to the next; at 65,536 rows of 124 columns
    each was 65 MB, mapped afresh and page-faulted in every time (the PRESS
    pass of one 500,000-row part took 0.50-0.56 s so against 0.38-0.39 s at
    24 MB blocks, measured, noisy).  The size depends on the width only, so
    every worker cuts a part the same way.
    """
    return int(min(SLICE_ROWS, max(1024, SLICE_BYTES // (8 * max(int(width), 1)))))


def _part_moments(frame, offset, light, pool, weights, schemes, n_total, part):
    """Moments of one part's rows and of each fold's rows among them.

    The part is cut into slices of :data:`SLICE_ROWS` rows, each slice's
    folds have their moments formed and merged in the same order as with
    per-fold masks, so the moments are the same bit for bit.  Within
    a slice, the candidate columns are built in blocks of
    :func:`_slice_rows` rows (their values do not depend on the blocks) into
    one matrix ``Z = [X, y]`` kept for the whole part, which avoids a fresh
    65 MB temporary per slice; the rows are then put in fold order by one
    stable sort of the fold labels, into a second kept matrix, so that each
    fold is a contiguous run of its rows in their original order: the rows
    of ``labels == j`` as one view, not a masked copy per fold.
    """
    from .moments import _candidate_chunks, _empty, stacked_moments

    keep = _complete(frame, pool)
    local = np.flatnonzero(keep)
    positions, ids = offset + local, row_ids(part, local)
    frame = frame.loc[keep].reset_index(drop=True) if not keep.all() else frame
    chunk = _candidate_chunks(light, weights)
    names = tuple(light.column_names) + (light.response,)
    width = len(light.column_names) + 1
    block = _slice_rows(width)
    total = _empty(width)
    folds = [[_empty(width) for _ in range(scheme.k)] for scheme, _ in schemes]
    Z = np.empty((min(SLICE_ROWS, len(frame)), width))  # [X, y] of a slice, as moments.stacked_moments takes them
    Zs = np.empty_like(Z) if schemes else None  # the same rows in fold order
    for a in range(0, len(frame), SLICE_ROWS):
        n = min(SLICE_ROWS, len(frame) - a)
        w = np.empty(n) if weights else None
        for b in range(0, n, block):
            out = chunk(frame.iloc[a + b:a + min(b + block, n)])
            Z[b:b + len(out[1]), :-1] = out[0]
            Z[b:b + len(out[1]), -1] = out[1]
            if w is not None:
                w[b:b + len(out[1])] = out[2]
            del out
        Zn = Z[:n]
        where = positions[a:a + n]
        first = int(where[0]) if len(where) else offset
        for s, (scheme, key) in enumerate(schemes):
            labels = fold_labels(where if scheme.kind == "blocked" else ids[a:a + n], scheme, n_total, key)
            order = np.argsort(labels, kind="stable")
            bounds = np.concatenate([[0], np.cumsum(np.bincount(labels, minlength=scheme.k))])
            np.take(Zn, order, axis=0, out=Zs[:n], mode="clip")  # a permutation; 'raise' would buffer out
            ws = None if w is None else w[order]
            pieces = []
            for j in range(scheme.k):
                lo, hi = int(bounds[j]), int(bounds[j + 1])
                pieces.append(stacked_moments(Zs[lo:hi], None if ws is None else ws[lo:hi], first, names))
                folds[s][j] = folds[s][j] + pieces[-1]
            if s == 0:  # the folds of one repetition partition the rows: their sum is the slice's moments
                piece = pieces[0]
                for other in pieces[1:]:
                    piece = piece + other
                total = total + piece
        if not schemes:
            total = total + stacked_moments(Zn, w, first, names)
    return total, folds, int((~keep).sum())


def _part_press(frame, offset, light, pool, weights, plan):
    """Σ w (e/(1−h))² and Σ w e² of each model over one part's rows (all-row fits), all models at once.

    ``plan`` holds the columns any model uses (``used``), their all-row means,
    the response mean and Σw, and per model its coefficients spread over
    ``used`` (zeros elsewhere, the columns of a matrix ``B``) and a factor
    ``L`` of its inverse centred cross-products, ``L Lᵀ = C⁻¹``, the factors
    side by side in one matrix (zero rows outside the model; block ``m``
    starts at column ``starts[m]``).  Then for the centred columns ``D``, the
    residuals of every model are ``ỹ − D B`` and a model's leverages are
    ``w (1/Σw + ‖(D L)ᵢ‖²)`` over its block: two matrix products per slice
    (measured 2-5× faster than a product per model at 19 models of 10 columns).

    The products are formed transposed, a row per model or factor column
    (``Bᵀ Dᵀ``, ``Lᵀ Dᵀ``), so that a model's block of squares is a run of
    contiguous rows, summed by whole-row additions: ``np.add.reduceat`` over
    the columns of ``D L`` took a fifth of the pass (measured, 500,000 rows,
    13 columns, 19 models).  The sums are the same up to rounding order.
    """
    from .moments import _candidate_chunks

    used, means, ybar, weight_sum, B, L, starts = plan
    keep = _complete(frame, pool)
    frame = frame.loc[keep].reset_index(drop=True) if not keep.all() else frame
    chunk = _candidate_chunks(light, weights, terms=plan_terms(light, used))
    models = B.shape[1]
    ends = np.append(starts[1:], L.shape[1])
    press = np.zeros(models)
    rss = np.zeros(models)
    exact = np.zeros(models, dtype=bool)
    # the widest temporaries are the candidate columns (zeros outside the terms built) and (D L)ᵀ
    step = _slice_rows(max(len(light.column_names), L.shape[1]))
    for a in range(0, len(frame), step):
        out = chunk(frame.iloc[a:a + step])
        Dt = (out[0][:, used] - means).T
        w = out[2] if len(out) == 3 else None
        E = (out[1] - ybar)[None, :] - B.T @ Dt  # a row per model
        Q = L.T @ Dt
        Q *= Q
        h = np.empty_like(E)
        for m in range(models):
            np.add.reduce(Q[starts[m]:ends[m]], axis=0, out=h[m])
        h += 1.0 / weight_sum
        if w is not None:
            h *= w
        exact |= np.any(h >= 1.0 - 1e-12, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            loo = E / (1.0 - h)
        if w is None:
            press += np.einsum("ij,ij->i", loo, loo)
            rss += np.einsum("ij,ij->i", E, E)
        else:
            press += np.einsum("j,ij,ij->i", w, loo, loo)
            rss += np.einsum("j,ij,ij->i", w, E, E)
    return press, rss, exact


def plan_terms(light, used) -> tuple:
    """Indices of the terms that hold the columns ``used`` (only those are built in the residual pass)."""
    wanted = set(int(c) for c in used)
    return tuple(i for i, term in enumerate(light.terms) if wanted & set(term.columns))


# ------------------------------------------------------------------------ what a run keeps
@dataclass(frozen=True, eq=False)
class PartsInfo:
    """What a search on a table in parts keeps of it: where it is, its fold moments, and how to reread it.

    Attributes
    ----------
    description : str
    files : tuple of str
        The files that went in (empty for a DataFrame).
    n_parts, n_rows : int
        Parts, and rows read.
    n_used : int
        Rows used (after dropping incomplete ones).
    sample_rows : int
        Rows of the random sample the checks and figures use.
    fold_tests : dict
        ``(kind, k, repeats, seed) → [[Moments of fold j] for each repeat]``.
    """

    description: str
    files: tuple
    n_parts: int
    n_rows: int
    n_used: int
    sample_rows: int
    fold_tests: dict
    table: object = None  # PartedTable, for the residual pass (not pickled)
    light: object = None
    pool: tuple = ()
    weights: str | None = None
    scheduler: str | None = None
    uses_dask: bool = False

    def __getstate__(self):
        state = dict(self.__dict__)
        state["table"] = None
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)

    def fold_pairs(self, moments, folds, seed):
        """(folds as (repeat, index), [(train, test) Moments]) for a fold scheme computed in the pass."""
        from .searches.crossval import Fold, _as_scheme

        scheme = _as_scheme(folds)
        key = (scheme.kind, scheme.k, scheme.repeats, int(seed))
        if key not in self.fold_tests:
            raise OptionError(
                f"a table read in parts has the fold moments of the run's {spell('folds')} only (cross-validation "
                f"by {scheme.kind} folds{'' if scheme.k is None else f' of K = {scheme.k}'} and seed {seed} was not "
                f"formed); use the run's folds, or hold the table in memory with {spell('read_in_parts', 'no')}")
        out_folds, pairs = [], []
        for r, tests in enumerate(self.fold_tests[key]):
            for j, test in enumerate(tests):
                out_folds.append(Fold(r, j, np.empty(0, dtype=np.int64)))
                pairs.append((moments - test, test))
        return out_folds, pairs

    def press(self, moments, columns_of: dict) -> dict:
        """PRESS of each model (``subset → columns``) from one pass over the parts (Allen 1974)."""
        from .rank import moment_fit

        fits, out = {}, {}
        for subset, cols in columns_of.items():
            try:
                fits[subset] = (list(cols), moment_fit(moments, list(cols)))
            except ValueError:  # moment_fit: a rank-deficient model; it gets NaN, as in memory
                out[subset] = float("nan")
        if not fits:
            return out
        if self.table is None:
            raise OptionError("PRESS of a table read in parts needs a second pass over its parts, which a loaded "
                              "result no longer has; search again to get it")
        used = sorted({c for cols, _ in fits.values() for c in cols})
        where = {c: i for i, c in enumerate(used)}
        keys = list(fits)
        B = np.zeros((len(used), len(keys)))
        blocks, starts, first = [], [], 0
        for m, key in enumerate(keys):
            cols, fit = fits[key]
            rows = [where[c] for c in cols]
            B[rows, m] = np.asarray(fit.coef[1:], dtype=float)
            block = np.zeros((len(used), max(len(cols), 1)))
            if cols:
                # the lower-right block of (AᵀWA)⁻¹ for A = [1, X] is the inverse of the centred cross-products
                block[rows, :] = np.linalg.cholesky(np.asarray(fit.cov_unscaled, dtype=float)[1:, 1:])
            blocks.append(block)
            starts.append(first)
            first += block.shape[1]
        plan = (np.asarray(used, dtype=np.int64), moments.mean[used], float(moments.mean[-1]),
                float(moments.weight_sum), B, np.hstack(blocks), np.asarray(starts, dtype=np.int64))
        with _client(self) as client:
            results = self.table.run(_part_press, lambda i: (0, self.light, self.pool, self.weights, plan),
                                     client=client)
        press = sum(r[0] for r in results)
        exact = np.any([r[2] for r in results], axis=0)
        for i, key in enumerate(keys):
            out[key] = float("inf") if exact[i] else float(press[i])
        return out


class _NoClient:
    def __enter__(self):
        return None

    def __exit__(self, *exc):
        return False


def _client(info):
    if info.uses_dask and info.table is not None and info.table.dask_frame is None:
        from .parallel import _dask_client

        return _dask_client(info.scheduler)
    return _NoClient()


# ------------------------------------------------------------------------ the whole intake
def prepare_in_parts(data, s, *, build_options, check_folds):
    """Intake, candidates and moments of a table read in parts.

    Under a keeper (:func:`kept_in`, a job's run store) the candidates, the
    checks' sample and each part's survey and moments are kept, and taken
    back when the settings are the same: a resumed job rereads only the
    parts it had not finished, and a job whose table gained files
    (:func:`selectkit.jobs.extend_job`) reads only those, keeping the forms
    chosen before, so that the moments of the old rows stay valid.

    Returns
    -------
    (Dataset, CandidateSet, Moments)
        The dataset and candidate set hold the random sample's rows (for the
        checks and figures) and carry a :class:`PartsInfo`; the moments are
        those of every row used.
    """
    from .data import Note
    from .searches.crossval import _as_scheme, _terms_only

    for name, off in (("resamples", 0), ("honest_folds", 0), ("split_fraction", 0.0)):
        if s[name] not in (off, None):
            raise OptionError(f"{spell(name)} draws from the rows in memory, and this table is read in parts; "
                              f"leave it at {off}, or hold the table in memory with {spell('read_in_parts', 'no')}")
    scheme = _as_scheme(s["folds"])
    if scheme.kind not in ("shuffled", "blocked"):
        raise OptionError(f"a table read in parts takes {spell('folds')} as a number of folds (got {scheme.kind} "
                          f"folds); give a whole number, or hold the table in memory with "
                          f"{spell('read_in_parts', 'no')}")
    uses_dask = s["backend"] == "dask" or s["scheduler"] is not None
    table = open_parts(data)
    keeper = _kept.current()
    setup_basis = _basis(sorted((k, repr(v)) for k, v in s.items() if k in _SETUP_SETTINGS), build_options)
    kept = keeper.get("parts-setup", setup_basis) if keeper is not None else None
    stub = PartsInfo("", (), 0, 0, 0, 0, {}, table=table, scheduler=s["scheduler"], uses_dask=uses_dask)
    with _client(stub) as client:
        if kept is None:
            surveys, merged, offsets, dataset, cands, sample_rows = _survey_and_sample(table, s, build_options,
                                                                                     client)
            n_total = int(offsets[-1])
            if check_folds and scheme.k > n_total:  # (the fold draw itself, of every row, is never made here)
                raise InputError(f"{scheme.k} folds need at least {scheme.k} rows; the table has {n_total}; "
                                 f"use fewer {spell('folds')}")
            in_use = (s["response"],) + tuple(dataset.predictors) + ((s["row_weights"],) if s["row_weights"] else ())
            light = _terms_only(cands)
        else:
            surveys = table.run(_survey, lambda i: (), client=client, stage="part-survey",
                                basis_of=lambda i: _basis(table.parts[i]))
            merged, offsets = _merge_surveys(table, surveys)
            n_total = int(offsets[-1])
            dataset, cands, in_use = kept["dataset"], kept["candidates"], tuple(kept["in_use"])
            _exact_refusals(table, offsets, merged, response=s["response"], weights=s["row_weights"],
                            pool=in_use[1:len(in_use) - (1 if s["row_weights"] else 0)],
                            missing_policy=s["incomplete_rows"])
            light = _terms_only(cands)
        schemes = [(scheme, key) for key in _repeat_keys(s["seed"], scheme.repeats or 1)]
        definition = _basis([(x.name, x.transform, x.params, x.columns, x.source) for x in light.terms],
                            light.response_transform, in_use, s["row_weights"], schemes)
        blocked = scheme.kind == "blocked"  # then a part's folds depend on its place in the table
        outcomes = table.run(_part_moments, lambda i: (int(offsets[i]), light, in_use, s["row_weights"], schemes,
                                                       n_total, table.parts[i]), client=client,
                             stage="part-moments",
                             basis_of=lambda i: _basis(table.parts[i], definition,
                                                       (int(offsets[i]), n_total) if blocked else None))
    moments = outcomes[0][0]
    fold_tests = [list(f) for f in outcomes[0][1]]
    for total, folds, _ in outcomes[1:]:
        moments = moments + total
        for r, tests in enumerate(folds):
            fold_tests[r] = [a + b for a, b in zip(fold_tests[r], tests)]
    dropped = sum(o[2] for o in outcomes)
    if moments.n == 0:
        raise InputError(f"every one of the {n_total} rows has a missing value in a column in use; no rows are left")

    if kept is None:
        notes = [n for n in dataset.report.notes
                 if not (n.kind == "dropped" and n.column is None and "missing value" in n.message)]
        dataset, cands = _rows_of(dataset, cands, sample_rows, tuple(notes))
        if keeper is not None:
            keeper.put("parts-setup", setup_basis, {"dataset": dataset, "candidates": cands, "in_use": list(in_use),
                                                    "files": list(table.files)})
    notes = [n for n in dataset.report.notes if not n.message.startswith(_PARTS_NOTE_START)]
    if dropped:
        notes.append(Note(None, "dropped", f"dropped {dropped} of {n_total} rows with a missing value in a column "
                                           f"in use"))
    sampled = dataset.n < moments.n
    notes.append(Note(None, "info", _parts_sentence(table, n_total, moments.n, dataset.n, sampled)))
    if kept is not None:
        added = [f for f in table.files if f not in set(kept["files"])]
        if added:
            notes.append(Note(None, "info", f"{_PARTS_NOTE_START}{len(added)} file(s) joined the table since the "
                                            f"forms were chosen and were added to the moments without rereading "
                                            f"the others: {', '.join(map(repr, added[:10]))}"
                                            f"{' and more' if len(added) > 10 else ''}; the forms and the checks' "
                                            f"sample are those of the earlier files"))
    info = PartsInfo(
        description=table.description, files=table.files, n_parts=len(table.parts), n_rows=n_total,
        n_used=int(moments.n), sample_rows=dataset.n,
        fold_tests={(scheme.kind, scheme.k, scheme.repeats, int(s["seed"])): fold_tests},
        table=table, light=light, pool=in_use, weights=s["row_weights"], scheduler=s["scheduler"],
        uses_dask=uses_dask)
    report = replace(dataset.report, source=table.description, n_rows_read=n_total, n_rows_used=int(moments.n),
                     notes=tuple(notes), dropped_rows=())
    dataset = replace(dataset, report=report)
    return dataset, replace(cands, dataset=dataset, parts=info), moments


#: The settings the candidates and the checks' sample depend on (a kept setup is reused only when they match).
_SETUP_SETTINGS = ("response", "predictors", "always_include", "leave_out", "row_weights", "incomplete_rows",
                   "keep_id_columns", "check_sample_rows", "seed")
_PARTS_NOTE_START = "the table ("


def _survey_and_sample(table, s, build_options, client):
    """First passes: the survey (taking the sample too when the row counts are known), the exact
    refusals, intake and candidates on the sample; returns the sample's rows for the checks."""
    import pandas as pd

    from . import candidates as _candidates
    from . import data as _data

    known = [part.rows for part in table.parts]
    basis_of = lambda i: _basis(table.parts[i])  # noqa: E731
    if all(r is not None for r in known):  # rows known first: the survey also takes the sample
        starts = np.concatenate([[0], np.cumsum(known)]).astype(np.int64)
        random = _random_positions(int(starts[-1]), s["check_sample_rows"], s["seed"])
        which = np.searchsorted(starts, random, side="right") - 1
        takes = [random[which == i] for i in range(len(table.parts))]
        surveys = table.run(_survey, lambda i: (int(starts[i]), takes[i]), client=client, stage="part-survey",
                            basis_of=basis_of)
        merged, offsets = _merge_surveys(table, surveys)
        n_total = int(offsets[-1])
        if not np.array_equal(offsets, starts):
            raise DataFileError(f"the parts of {table.description} hold other row counts than their metadata "
                                f"says; check that no file is being written")
        wanted = _sample_positions(n_total, s["check_sample_rows"], s["seed"], merged)[1]
        stale = [i for i, sv in enumerate(surveys) if "rows" not in sv or not np.array_equal(sv["take"], takes[i])]
        retaken = dict(zip(stale, table.run(_take, lambda i: (wanted[which == i], int(starts[i])), client=client,
                                            only=stale))) if stale else {}
        pieces = [retaken[i] if i in retaken else sv["rows"].loc[sv["rows"].index.isin(wanted)]
                  for i, sv in enumerate(surveys)]
    else:
        surveys = table.run(_survey, lambda i: (), client=client, stage="part-survey", basis_of=basis_of)
        merged, offsets = _merge_surveys(table, surveys)
        n_total = int(offsets[-1])
        random, wanted = _sample_positions(n_total, s["check_sample_rows"], s["seed"], merged)
        which = np.searchsorted(offsets, wanted, side="right") - 1
        by_part = [wanted[which == p] for p in range(len(table.parts))]
        pieces = table.run(_take, lambda i: (by_part[i], int(offsets[i])), client=client)
    surveys = [{k: v for k, v in sv.items() if k not in ("rows", "take")} for sv in surveys]
    sample = pd.concat([p for p in pieces if len(p)], axis=0)
    positions = sample.index.to_numpy(dtype=np.int64)
    sample = sample.reset_index(drop=True)

    # intake on the sample: under "refuse" first with "drop", to learn the columns in use before
    # the exact refusals name the part and row of a missing value
    policy = s["incomplete_rows"]
    prepare_kwargs = dict(
        response=s["response"], predictors=list(s["predictors"]) if s["predictors"] else None,
        forced=list(s["always_include"]), exclude=list(s["leave_out"]), weights=s["row_weights"],
        keep_identifiers=list(s["keep_id_columns"]))
    try:
        dataset = _data.prepare(sample, missing="drop", **prepare_kwargs)
    except InputError:
        _exact_refusals(table, offsets, merged, response=s["response"], weights=s["row_weights"],
                        pool=[c for c in merged if c != s["response"] and c != s["row_weights"]
                              and c not in s["leave_out"]], missing_policy=policy)
        raise
    _exact_refusals(table, offsets, merged, response=s["response"], weights=s["row_weights"],
                    pool=tuple(dataset.predictors), missing_policy=policy)
    dataset = _with_full_levels(dataset, merged)
    # the curvature screen runs on the sample, with its evidence scaled to the rows the search will use
    cands = _candidates.build_candidates(dataset, **build_options, rows_represented=n_total)
    # the checks' rows: the random sample, without the rows added for the extremes and the levels
    global_rows = positions[np.asarray(dataset.source_rows)]
    chosen = np.flatnonzero(np.isin(global_rows, random))
    return surveys, merged, offsets, dataset, cands, (chosen, global_rows[chosen])


def _parts_sentence(table, n_total, n_used, n_sample, sampled) -> str:
    where = f"{table.description}, read in {len(table.parts)} part{'s' if len(table.parts) != 1 else ''}"
    if not sampled:
        return (f"{_PARTS_NOTE_START}{where}) was read part by part: {n_used} of {n_total} rows used; every row is also "
                f"in the checks and figures")
    return (f"{_PARTS_NOTE_START}{where}) was read part by part: coefficients, criteria, CV errors and PRESS use all "
            f"{n_used} rows used; the forms' fitted powers, the twin, VIF and curvature screens, the checks "
            f"and the figures use a seeded sample of {n_sample} rows (plus, for the forms, the rows holding each "
            f"column's extremes and each level)")


def _with_full_levels(dataset, merged):
    """Reference level of each categorical: the most frequent over all rows (ties: first in sort order)."""
    import pandas as pd

    frame = dataset.frame
    changed = {}
    notes = list(dataset.report.notes)
    for name in dataset.categorical:
        col = merged.get(name)
        if col is None or not col.levels:
            continue
        cat = frame[name].array
        try:
            levels = sorted(cat.categories)
        except TypeError:
            levels = list(cat.categories)
        counts = {v: col.levels.get(v, [0])[0] for v in levels}
        reference = max(levels, key=lambda v: counts[v])
        order = [reference] + [v for v in levels if v != reference]
        if list(cat.categories) != order:
            changed[name] = pd.Categorical(cat, categories=order)
            old = cat.categories[0]
            notes = [n if not (n.column == name and "reference level" in n.message)
                     else replace(n, message=n.message.replace(repr(old), repr(reference)))
                     for n in notes]
    if not changed:
        return dataset
    frame = frame.assign(**changed)
    return replace(dataset, frame=frame, report=replace(dataset.report, notes=tuple(notes)))


def _rows_of(dataset, cands, sample_rows, notes):
    """The dataset and candidates on the checks' rows only (``sample_rows``: their places here and in the table)."""
    rows, source_rows = sample_rows
    source_rows = np.asarray(source_rows, dtype=np.int64)
    source_rows.flags.writeable = False
    y = np.array(dataset.y[rows])
    y.flags.writeable = False
    w = None
    if dataset.weights is not None:
        w = np.array(dataset.weights[rows])
        w.flags.writeable = False
    dataset = replace(dataset, y=y, weights=w, frame=dataset.frame.iloc[rows].reset_index(drop=True),
                      source_rows=source_rows, report=replace(dataset.report, notes=notes),
                      identifiers=None if dataset.identifiers is None
                      else dataset.identifiers.iloc[rows].reset_index(drop=True))
    cands = replace(cands, matrix=np.ascontiguousarray(cands.matrix[rows]), y=np.array(cands.y[rows]),
                    weights=None if cands.weights is None else np.array(cands.weights[rows]),
                    y_original=None if cands.y_original is None else np.array(cands.y_original[rows]),
                    dataset=dataset, parts=None)
    return dataset, cands
