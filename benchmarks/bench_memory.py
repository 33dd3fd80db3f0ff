"""Memory of the moment pass over a file: peak RSS must not grow with the number of rows.

Run from the project root::

    python benchmarks/bench_memory.py                   # 400 000 rows x 50 candidates (about a minute)
    python benchmarks/bench_memory.py --rows 10000000   # the full target: < 2 GB peak

Steps: write ``rows`` × 50 invented candidate columns and a response to a
Parquet file in chunks (never holding the table), then, in a fresh process,
run :func:`selectkit.moments.moments_from_file` over it and report the peak
resident set size (``resource.getrusage``), next to the peak of a process that
only imports the same libraries, and the time of the pass.  The moments are
checked against the same chunks regenerated in memory one at a time.
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

N_COLUMNS = 50
WRITE_CHUNK = 200_000
COLUMN_NAMES = [f"c{j:02d}" for j in range(N_COLUMNS)]


def _chunk(seed: int, index: int, rows: int):
    rng = np.random.default_rng([seed, index])
    X = rng.standard_normal((rows, N_COLUMNS))
    X[:, 1:] += 0.5 * X[:, :-1]  # some correlation between neighbours
    y = 20.0 + X[:, :8] @ np.linspace(1.0, -0.6, 8) + rng.standard_normal(rows)
    return X, y


def _chunks(seed: int, rows: int):
    for index, start in enumerate(range(0, rows, WRITE_CHUNK)):
        yield _chunk(seed, index, min(WRITE_CHUNK, rows - start))


def write_file(path: str, rows: int, seed: int) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = pa.schema([(name, pa.float64()) for name in COLUMN_NAMES] + [("yield_kg_m2", pa.float64())])
    with pq.ParquetWriter(path, schema) as writer:
        for X, y in _chunks(seed, rows):
            arrays = [pa.array(X[:, j]) for j in range(N_COLUMNS)] + [pa.array(y)]
            writer.write_table(pa.Table.from_arrays(arrays, schema=schema))


def _to_xy(frame):
    return frame[COLUMN_NAMES].to_numpy(dtype=float), frame["yield_kg_m2"].to_numpy(dtype=float)


def _peak_mb() -> float:
    import resource

    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kilobytes on Linux


def child(mode: str, path: str) -> None:
    """Run in a fresh process: import only, or the full pass; print JSON."""
    import pandas  # noqa: F401
    import pyarrow.parquet  # noqa: F401

    from selectkit.moments import moments_from_file

    out = {"peak_mb": None}
    if mode == "pass":
        t0 = time.perf_counter()
        mom = moments_from_file(path, transform=_to_xy)
        out["seconds"] = time.perf_counter() - t0
        out["n"] = mom.n
        out["cross"] = mom.cross.tolist()
        out["mean"] = mom.mean.tolist()
    out["peak_mb"] = _peak_mb()
    print(json.dumps(out))


def _run_child(mode: str, path: str) -> dict:
    env = dict(os.environ)
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
    done = subprocess.run([sys.executable, os.path.abspath(__file__), "--child", mode, path],
                          capture_output=True, text=True, env=env, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=400_000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--keep", action="store_true", help="keep the Parquet file")
    parser.add_argument("--child", nargs=2, metavar=("MODE", "PATH"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(*args.child)
        return

    from selectkit.moments import moments_from_chunks

    folder = tempfile.mkdtemp(prefix="selectkit-bench-")
    path = os.path.join(folder, "bays.parquet")
    t0 = time.perf_counter()
    write_file(path, args.rows, args.seed)
    write_s = time.perf_counter() - t0
    size_mb = os.path.getsize(path) / 2**20
    baseline = _run_child("import", path)
    result = _run_child("pass", path)
    want = moments_from_chunks(_chunks(args.seed, args.rows))
    cross = np.asarray(result["cross"])
    err = np.abs(cross - want.cross).max() / np.abs(want.cross).max()
    in_memory_mb = args.rows * (N_COLUMNS + 1) * 8 / 2**20
    print(f"\nMoment pass over a Parquet file ({args.rows:,} rows x {N_COLUMNS} candidates + response)")
    rows = [
        ("file written (chunks of 200 000 rows)", f"{size_mb:,.0f} MB on disk", f"{write_s:.1f} s"),
        ("the table held in memory would take", f"{in_memory_mb:,.0f} MB", "-"),
        ("peak RSS, process that only imports", f"{baseline['peak_mb']:,.0f} MB", "-"),
        ("peak RSS, moments_from_file pass", f"{result['peak_mb']:,.0f} MB", f"{result['seconds']:.1f} s"),
        ("rows per second of the pass", f"{args.rows / result['seconds']:,.0f}", "-"),
        ("max relative error vs in-memory chunks", f"{err:.1e}", "-"),
    ]
    width = max(len(r[0]) for r in rows)
    for label, value, secs in rows:
        print(f"  {label.ljust(width)}  {value:>16}  {secs:>8}")
    print("  target: peak < 2 GB at 10 000 000 rows (run with --rows 10000000)")
    if result["n"] != args.rows or err > 1e-9:
        raise SystemExit("the pass over the file disagrees with the in-memory moments")
    if not args.keep:
        os.remove(path)
        os.rmdir(folder)


if __name__ == "__main__":
    main()
