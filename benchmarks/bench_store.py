"""Overhead of the run store: the same search run plainly and as a checkpointed job.

Plain is what a notebook user does: ``prepare_search`` → ``run_methods`` →
``finish`` → write the shortlist CSV.  The job does the same through
:mod:`selectkit.jobs` — data fingerprint, lock, every work unit encoded as data and
committed in its own SQLite transaction, pooled results, shortlist and log in
the store.  Both skip the HTML report (not part of the store's cost) and both
run after a warm-up, so numba compilation is not counted.

The data are the invented greenhouse table (``selectkit.demo``); the exact
best-subset search over the first N numeric predictors, each offered as x,
log x, sqrt x and 1/x.  The default (N = 17, 62 terms) is a search of half a
minute to a minute on one core; ``--quick`` (N = 14) a few seconds.

The store's cost grows with the number of work units and the size of their
results, not with the search's seconds, so besides the measured share the
benchmark prints the store's time as a share of a 60-second search.

Usage::

    python benchmarks/bench_store.py            # about a minute per run, two runs each
    python benchmarks/bench_store.py --quick

Target: overhead below 5 % of a 60-second search.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from selectkit import api  # noqa: E402
from selectkit.demo import RESPONSE, make_greenhouse  # noqa: E402
from selectkit.jobs import RunStore, load_job  # noqa: E402
from selectkit.jobs.runner import _ApiEngine, _run  # noqa: E402
from selectkit.report import tables  # noqa: E402


class _CsvOnly(_ApiEngine):
    def write(self, result, folder):
        return {"shortlist_csv": tables.write_csv(Path(folder) / "shortlist.csv", result.ranking)}


def _numeric_predictors(frame, count):
    names = [c for c in frame.columns if c != RESPONSE and frame[c].dtype.kind == "f"]
    return names[:count]


def _job_text(predictors, workers):
    listed = ", ".join(f'"{p}"' for p in predictors)
    return f"""\
[data]
table = "greenhouse.csv"
response = "{RESPONSE}"
predictors = [{listed}]

[forms]
forms = ["identity", "log", "sqrt", "reciprocal"]

[search]
methods = ["exhaustive"]

[run]
workers = {workers}
output = "results"
"""


def _plain(spec) -> tuple[float, bytes]:
    started = time.perf_counter()
    setup = api.prepare_search(str(spec.table), **spec.search_options())
    founds = api.run_methods(setup, n_jobs=spec.workers)
    result = api.finish(setup, founds, n_jobs=spec.workers)
    path = tables.write_csv(spec.output.parent / "plain-shortlist.csv", result.ranking)
    return time.perf_counter() - started, path.read_bytes()


_STORE_SECONDS = {"total": 0.0}


def _timed(function):
    def wrapper(*args, **kwargs):
        started = time.perf_counter()
        try:
            return function(*args, **kwargs)
        finally:
            _STORE_SECONDS["total"] += time.perf_counter() - started

    return wrapper


def _account_store_work():
    """Time every call into the store (and the data fingerprint): the store's own cost, free of machine noise."""
    from selectkit.jobs import runner, store

    for name in ("create_or_open", "record_unit", "finished_units", "finished_keys", "unit_counts", "set_many",
                 "get", "log", "clear", "record_pooled", "record_shortlist"):
        setattr(store.RunStore, name, _timed(getattr(store.RunStore, name)))
    runner.data_fingerprint = _timed(runner.data_fingerprint)
    runner._ApiEngine.unit_keys = _timed(runner._ApiEngine.unit_keys)  # planning once more to learn the unit keys
    store.StoreLock.acquire = _timed(store.StoreLock.acquire)
    runner.atomic_write_text = _timed(runner.atomic_write_text)


def _job(spec) -> tuple[float, bytes, object]:
    started = time.perf_counter()
    outcome = _run(spec, resume=False, progress=False, engine=_CsvOnly())
    return time.perf_counter() - started, outcome.outputs["shortlist_csv"].read_bytes(), outcome


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="a search of a few seconds instead of about a minute")
    parser.add_argument("--predictors", type=int, default=None, help="numeric predictors searched (default 17, quick 14)")
    parser.add_argument("--repeats", type=int, default=None, help="runs of each way; the fastest counts (default 2, quick 1)")
    parser.add_argument("--workers", type=int, default=1)
    args = parser.parse_args(argv)
    count = args.predictors or (14 if args.quick else 17)
    repeats = args.repeats or (1 if args.quick else 2)

    _account_store_work()
    frame = make_greenhouse()
    predictors = _numeric_predictors(frame, count)
    with tempfile.TemporaryDirectory(prefix="selectkit-bench-store-") as tmp:
        folder = Path(tmp)
        frame.to_csv(folder / "greenhouse.csv", index=False)
        (folder / "job.toml").write_text(_job_text(predictors, args.workers))
        spec = load_job(folder / "job.toml")

        # Warm-up: compile the kernels on a small search (not timed).
        warm = load_job(folder / "job.toml")
        _plain(warm.with_settings(predictors=tuple(predictors[:4])))

        plain_times, job_times, store_times = [], [], []
        outcome = None
        for _ in range(repeats):
            seconds, plain_bytes = _plain(spec)
            plain_times.append(seconds)
            _STORE_SECONDS["total"] = 0.0
            seconds, job_bytes, outcome = _job(spec)
            job_times.append(seconds)
            store_times.append(_STORE_SECONDS["total"])
            if job_bytes != plain_bytes:
                print("ERROR: the job's shortlist differs from the plain search's", file=sys.stderr)
                return 1
        with RunStore.open_read_only(outcome.store) as store:
            unit_seconds = [seconds for _, seconds, _ in store.unit_times()]
        size = outcome.store.stat().st_size + sum(
            p.stat().st_size for p in outcome.store.parent.glob(outcome.store.name + "-*"))

    plain, job = min(plain_times), min(job_times)
    overhead = job - plain
    print(f"search: exact best subset, {len(predictors)} predictors x 4 forms, {outcome.units_total} work units, "
          f"{outcome.models_evaluated:,} models evaluated, {args.workers} worker(s)")
    print(f"plain (prepare, run, finish, shortlist CSV): {plain:8.2f} s   (runs: "
          f"{', '.join(f'{t:.2f}' for t in plain_times)})")
    print(f"job with run store:                          {job:8.2f} s   (runs: "
          f"{', '.join(f'{t:.2f}' for t in job_times)})")
    store_work = min(store_times)
    print(f"wall-clock difference: {overhead:+.2f} s = {100 * overhead / plain:+.1f} % of the plain search "
          f"(includes the noise of a shared machine)")
    print(f"time spent in the store (fingerprint, lock, unit keys, pickling, commits, pooled results, shortlist): "
          f"{store_work:.3f} s = {100 * store_work / plain:.2f} % of this search, "
          f"{100 * store_work / 60:.2f} % of a 60-second search (target < 5 %)")
    print(f"store on disk {size / 1024:.0f} KiB; mean unit {sum(unit_seconds) / max(1, len(unit_seconds)):.2f} s")
    print("shortlists: identical")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
