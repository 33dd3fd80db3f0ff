import numpy as np
import pytest

from selectkit import parallel
from selectkit.errors import OptionError
from selectkit.parallel import WorkUnit, check_n_jobs, run_units, spawn_seeds


def _square_with_draw(unit):
    # each unit draws from its own spawned seed: the result must not depend on the worker
    rng = np.random.default_rng(unit.payload["seed"])
    return unit.payload["x"] ** 2 + rng.random()


def _units(count=7):
    seeds = spawn_seeds(123, count)
    return [WorkUnit(key=f"u{i}", payload={"x": i, "seed": seeds[i]}) for i in range(count)]


@pytest.mark.parametrize("backend,n_jobs", [("sequential", 1), ("loky", 2), ("threading", 2)])
def test_results_in_unit_order_and_independent_of_workers(backend, n_jobs, monkeypatch):
    # start-up taken as free: the first unit runs here, the other six on the workers
    monkeypatch.setattr(parallel, "WORKER_START_SECONDS", 0.0)
    reference = [_square_with_draw(u) for u in _units()]
    seen = []
    got = run_units(_square_with_draw, _units(), n_jobs=n_jobs, backend=backend,
                    on_result=lambda i, r: seen.append(i))
    assert got == reference
    assert seen == list(range(7))


def test_spawn_seeds_are_stable_and_distinct():
    a = [np.random.default_rng(s).random() for s in spawn_seeds(5, 4)]
    b = [np.random.default_rng(s).random() for s in spawn_seeds(5, 4)]
    assert a == b and len(set(a)) == 4


@pytest.mark.parametrize("bad", [0, -2, 1.5, "2", True])
def test_bad_n_jobs_is_refused(bad):
    with pytest.raises(OptionError):
        check_n_jobs(bad)


def test_unknown_backend_lists_valid_ones():
    with pytest.raises(OptionError, match="loky"):
        run_units(_square_with_draw, _units(2), n_jobs=2, backend="spark")


def test_atomic_write_replaces_whole_file_with_normal_permissions(tmp_path):
    import os
    import stat

    from selectkit._io import atomic_write_text

    target = tmp_path / "shortlist.csv"
    target.write_text("old contents that are longer than the new ones\n")
    atomic_write_text(target, "new\n")
    assert target.read_text() == "new\n"
    umask = os.umask(0)
    os.umask(umask)
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~umask
    assert [p.name for p in tmp_path.iterdir()] == ["shortlist.csv"]  # no temporary file left behind


# ------------------------------------------------------------- when workers are started
def test_break_even_of_workers():
    # S·w/(w−1): with S = 2 s and two workers, 4 s of work left; the first unit is left out of
    # the projection once others are timed (it carries one-time costs)
    assert parallel.projected_seconds([9.0, 0.1, 0.3, 0.2], 10) == pytest.approx(2.0)
    assert parallel.projected_seconds([0.4], 5) == pytest.approx(2.0)
    S = parallel.WORKER_START_SECONDS
    assert not parallel.worth_workers([0.0, 2 * S / 10 * 0.99], 10, n_jobs=2)
    assert parallel.worth_workers([0.0, 2 * S / 10 * 1.01], 10, n_jobs=2)
    # four workers need less work to pay: S·4/3
    assert parallel.worth_workers([0.0, S * 4 / 3 / 10 * 1.01], 10, n_jobs=4)
    assert not parallel.worth_workers([100.0], 10, n_jobs=1)  # one worker: never
    assert not parallel.worth_workers([100.0], 1, n_jobs=2)  # one unit left: no second worker to use
    assert not parallel.worth_workers([], 1000, n_jobs=2)  # nothing timed yet: the first unit runs here


class _RecordingParallel:
    """Stands in for ``joblib.Parallel`` and records the backend of every call."""

    calls: list = []

    def __init__(self, *args, **kwargs):
        type(self).calls.append(kwargs.get("backend"))
        self._inner = _REAL_PARALLEL(*args, **kwargs)

    def __call__(self, *args, **kwargs):
        return self._inner(*args, **kwargs)


import joblib as _joblib  # noqa: E402

_REAL_PARALLEL = _joblib.Parallel


def _greenhouse(n=150, seed=11):
    # invented bays: yield from log(light) and CO2, two noise probes
    import pandas as pd

    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"light": rng.uniform(8, 30, n), "co2": rng.uniform(0, 600, n),
                          "probe_a": rng.normal(50, 10, n), "probe_b": rng.normal(5, 1, n),
                          "night_temp": rng.uniform(14, 19, n)})
    frame["yield_kg_m2"] = 4 + 5 * np.log(frame["light"]) + 0.004 * frame["co2"] + rng.normal(0, 0.7, n)
    return frame


def _search(frame, n_jobs):
    import selectkit

    return selectkit.search(frame, response="yield_kg_m2", methods=("exhaustive", "forward"),
                            forms=("identity", "log"), workers=n_jobs, seed=2)


def test_small_search_on_two_workers_stays_here_and_matches_one(monkeypatch):
    import pandas as pd

    frame = _greenhouse()
    one = _search(frame, 1)
    monkeypatch.setattr(_joblib, "Parallel", _RecordingParallel)
    _RecordingParallel.calls = []
    two = _search(frame, 2)
    assert _RecordingParallel.calls == []  # no worker was started for a search of milliseconds
    pd.testing.assert_frame_equal(one.shortlist, two.shortlist)
    # the best model's rss against an independent least-squares fit (numpy lstsq) of its columns
    best = one.terms(0)
    built = {"light": frame["light"], "log(light)": np.log(frame["light"]), "co2": frame["co2"],
             "log(co2)": np.log(frame["co2"]), "probe_a": frame["probe_a"], "log(probe_a)": np.log(frame["probe_a"]),
             "probe_b": frame["probe_b"], "log(probe_b)": np.log(frame["probe_b"]),
             "night_temp": frame["night_temp"], "log(night_temp)": np.log(frame["night_temp"])}
    A = np.column_stack([np.ones(len(frame))] + [built[t] for t in best])
    coef, *_ = np.linalg.lstsq(A, frame["yield_kg_m2"].to_numpy(), rcond=None)
    rss = float(np.sum((frame["yield_kg_m2"].to_numpy() - A @ coef) ** 2))
    assert {"log(light)"} <= set(best) and ({"co2", "log(co2)"} & set(best))
    assert one.models["rss"].iloc[0] == pytest.approx(rss, rel=1e-9)


def test_large_work_still_goes_to_workers_with_the_same_answer(monkeypatch):
    import pandas as pd

    frame = _greenhouse()
    one = _search(frame, 1)
    # a work estimate far above the break-even: the units after the first go to loky workers
    monkeypatch.setattr(parallel, "projected_seconds", lambda seconds, units_left: 1e6)
    monkeypatch.setattr(_joblib, "Parallel", _RecordingParallel)
    _RecordingParallel.calls = []
    two = _search(frame, 2)
    assert "loky" in _RecordingParallel.calls
    pd.testing.assert_frame_equal(one.shortlist, two.shortlist)


def test_handoff_to_workers_keeps_order_and_stops(monkeypatch):
    monkeypatch.setattr(parallel, "WORKER_START_SECONDS", 0.0)
    calls = []
    got = run_units(_square_with_draw, _units(), n_jobs=2, backend="loky",
                    should_stop=lambda: len(calls) >= 3, on_result=lambda i, r: calls.append(i))
    reference = [_square_with_draw(u) for u in _units()]
    assert calls == list(range(len(got))) and 3 <= len(got) < 7
    assert got == reference[: len(got)]
