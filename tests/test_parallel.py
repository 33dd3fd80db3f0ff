import numpy as np
import pytest

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
def test_results_in_unit_order_and_independent_of_workers(backend, n_jobs):
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
