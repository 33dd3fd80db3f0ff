"""Peak memory of a search as a user runs it, beside the size of the table, and of the moments pass alone.

Run from the project root::

    python benchmarks/bench_memory.py             # quick: 20 000 and 80 000 rows x 12 predictors (~2 minutes)
    python benchmarks/bench_memory.py --rows 100000,1000000 --columns 12   # larger tables

For each size an invented table of positive predictors (``benchmarks/_data.py``,
``bay_chunks``) is written to Parquet and to CSV in chunks, never held whole.
Then, each in a fresh process, its peak resident set size is read
(``resource.getrusage(RUSAGE_SELF).ru_maxrss``, which counts everything the
process touched: numpy, pandas, numba, statsmodels, not only Python objects):

* ``selectkit.search(path, ...)`` on the Parquet file and on the CSV file —
  the path of the command line and of a notebook given a file;
* ``selectkit.search(frame, ...)`` on a DataFrame read from the Parquet file
  in that process (the frame's own memory is part of the peak, as it is for
  a user who holds it);
* two floors: a process that only imports the same libraries, and one that
  runs the same search on the first 500 rows (every library and kernel the
  pipeline loads, almost no data); the growth with the table is read above
  the second;
* :func:`selectkit.moments.moments_from_file` alone, the chunked moments
  stage.  ``selectkit.search`` does not call it (it reads the whole table and
  builds the candidate forms in memory); it is kept as the stage it is, and
  its moments are checked against the same chunks made again in memory.

Every search uses the defaults (candidate forms, screens, method "auto",
ranking, checks of the best models), seed 0.  The table "in memory" is
``rows × (predictors + 1) × 8`` bytes, the float64 size of the data alone.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from _data import bay_chunks  # noqa: E402

RESPONSE = "yield_kg_m2"
WRITE_CHUNK = 200_000


def _names(n_columns):
    return [f"c{j:02d}" for j in range(n_columns)]


def write_files(folder: str, rows: int, n_columns: int, seed: int) -> tuple[str, str]:
    """Write the table as Parquet and as CSV, chunk by chunk; return both paths."""
    import pandas as pd
    import pyarrow as pa
    import pyarrow.parquet as pq

    names = _names(n_columns)
    parquet = os.path.join(folder, "bays.parquet")
    csv = os.path.join(folder, "bays.csv")
    schema = pa.schema([(name, pa.float64()) for name in names] + [(RESPONSE, pa.float64())])
    with pq.ParquetWriter(parquet, schema) as writer, open(csv, "w", newline="") as text:
        for i, (X, y) in enumerate(bay_chunks(seed, rows, n_columns, WRITE_CHUNK)):
            writer.write_table(pa.Table.from_arrays([pa.array(X[:, j]) for j in range(n_columns)] + [pa.array(y)],
                                                    schema=schema))
            frame = pd.DataFrame(X, columns=names)
            frame[RESPONSE] = y
            frame.to_csv(text, index=False, header=(i == 0), float_format="%.10g")
    return parquet, csv


def _peak_mb() -> float:
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kilobytes on Linux


def child(mode: str, path: str, n_columns: int) -> None:
    """Run in a fresh process and print one JSON line: the peak, the seconds, what was found."""
    import pandas as pd
    import pyarrow.parquet  # noqa: F401

    import selectkit
    from selectkit.moments import moments_from_file

    out = {}
    names = _names(n_columns)
    start = time.perf_counter()
    if mode == "stage":
        def to_xy(frame):
            return frame[names].to_numpy(dtype=float), frame[RESPONSE].to_numpy(dtype=float)

        mom = moments_from_file(path, transform=to_xy)
        out.update(n=mom.n, cross=mom.cross.tolist())
    elif mode in ("search-file", "search-frame"):
        data = pd.read_parquet(path) if mode == "search-frame" else path
        result = selectkit.search(data, response=RESPONSE, seed=0)
        out["terms"] = list(result.terms(0))
    elif mode != "import":
        raise SystemExit(f"unknown child mode {mode!r}")
    out["seconds"] = time.perf_counter() - start
    out["peak_mb"] = _peak_mb()
    print(json.dumps(out))


def _run_child(mode: str, path: str, n_columns: int) -> dict:
    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    done = subprocess.run([sys.executable, os.path.abspath(__file__), "--child", mode, path, str(n_columns)],
                          capture_output=True, text=True, env=env)
    if done.returncode != 0:
        raise SystemExit(f"child {mode} on {path} failed: {done.stderr.strip()[-2000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def _table(title, header, rows):
    widths = [max(len(str(r[i])) for r in [header] + rows) for i in range(len(header))]
    print(f"\n{title}")
    for r in [header, ["-" * w for w in widths]] + rows:
        print("  ".join(str(c).rjust(w) if i else str(c).ljust(w) for i, (c, w) in enumerate(zip(r, widths))))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", default="20000,80000", help="table sizes, comma-separated (default 20000,80000)")
    parser.add_argument("--columns", type=int, default=12, help="predictors of the table (default 12)")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--child", nargs=3, metavar=("MODE", "PATH", "COLUMNS"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(args.child[0], args.child[1], int(args.child[2]))
        return

    from selectkit.moments import moments_from_chunks

    sizes = [int(v) for v in args.rows.split(",")]
    p = args.columns
    search_rows, stage_rows, failures = [], [], []
    floor = None
    for rows in sizes:
        with tempfile.TemporaryDirectory(prefix="selectkit-bench-") as folder:
            t0 = time.perf_counter()
            parquet, csv = write_files(folder, rows, p, args.seed)
            write_s = time.perf_counter() - t0
            if floor is None:
                floor = _run_child("import", parquet, p)
                small = os.path.join(folder, "small.parquet")
                import pandas as pd

                pd.read_parquet(parquet).iloc[:500].to_parquet(small)
                small_floor = _run_child("search-file", small, p)
            table_mb = rows * (p + 1) * 8 / 2**20
            found = {}
            for label, mode, path in (("search(Parquet path)", "search-file", parquet),
                                      ("search(CSV path)", "search-file", csv),
                                      ("search(DataFrame)", "search-frame", parquet)):
                got = _run_child(mode, path, p)
                found[label] = got["terms"]
                search_rows.append([f"{rows:,}", label, f"{table_mb:,.1f}", f"{got['peak_mb']:,.0f}",
                                    f"{got['peak_mb'] / table_mb:,.1f}x",
                                    f"{(got['peak_mb'] - small_floor['peak_mb']) / table_mb:,.1f}x",
                                    f"{got['seconds']:.1f}"])
            if len({tuple(t) for t in found.values()}) != 1:
                failures.append(f"{rows} rows: the three inputs gave different best models: {found}")
            stage = _run_child("stage", parquet, p)
            want = moments_from_chunks(bay_chunks(args.seed, rows, p, WRITE_CHUNK))
            err = np.abs(np.asarray(stage["cross"]) - want.cross).max() / np.abs(want.cross).max()
            if stage["n"] != rows or err > 1e-9:
                failures.append(f"{rows} rows: the moments pass over the file disagrees with the in-memory moments")
            stage_rows.append([f"{rows:,}", f"{table_mb:,.1f}", f"{os.path.getsize(parquet) / 2**20:,.1f}",
                               f"{stage['peak_mb']:,.0f}", f"{stage['peak_mb'] / table_mb:,.1f}x",
                               f"{stage['seconds']:.1f}", f"{err:.1e}", f"{write_s:.1f}"])
    print(f"selectkit memory benchmark: {p} positive predictors + response, default search settings, seed 0; "
          f"peak RSS of a fresh process (ru_maxrss)")
    print(f"  floors: a process that only imports selectkit, pandas and pyarrow peaks at {floor['peak_mb']:,.0f} MB; "
          f"the same search on 500 rows at {small_floor['peak_mb']:,.0f} MB ({small_floor['seconds']:.1f} s)")
    _table("1. The path a user runs: selectkit.search (MB unless said)",
           ["rows", "input", "table in memory", "peak RSS", "peak / table", "(peak - 500-row search) / table",
            "seconds"],
           search_rows)
    _table("2. The stage alone: moments_from_file (chunked moments pass; selectkit.search does not call it)",
           ["rows", "table in memory", "Parquet on disk", "peak RSS", "peak / table", "seconds",
            "max rel. error vs in-memory", "files written (s)"], stage_rows)
    if failures:
        raise SystemExit("; ".join(failures))


if __name__ == "__main__":
    main()
