"""A job run on a Dask cluster gives the shortlist of a local run.

Starts a real ``dask.distributed.LocalCluster`` (two worker processes on
127.0.0.1), points the job at its scheduler address and compares the
shortlist CSV byte for byte with the same job run with the local backend.
"""

from __future__ import annotations


import pytest

from selectkit.jobs import load_job, store_status
from selectkit.jobs.runner import _run
from tests.test_jobs_resume import REAL_JOB, TablesEngine, write_positive_table

distributed = pytest.importorskip("distributed", reason="dask.distributed is not installed (pip install 'selectkit[dask]')")


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as local:
        yield local


def _job(folder, extra=""):
    write_positive_table(folder / "bays.csv")
    (folder / "job.toml").write_text(REAL_JOB + extra)
    return load_job(folder / "job.toml")


def test_dask_backend_gives_the_local_shortlist(tmp_path_factory, cluster):
    local_folder = tmp_path_factory.mktemp("local")
    local = _run(_job(local_folder), resume=True, progress=False, engine=TablesEngine())

    dask_folder = tmp_path_factory.mktemp("dask")
    spec = _job(dask_folder, f'workers = 8\nbackend = "dask"\nscheduler = "{cluster.scheduler_address}"\n')
    assert spec.backend == "dask" and spec.scheduler == cluster.scheduler_address
    on_dask = _run(spec, resume=True, progress=False, engine=TablesEngine())

    assert local.complete and on_dask.complete
    assert on_dask.units_done == local.units_done == local.units_total
    assert on_dask.models_evaluated == local.models_evaluated
    assert on_dask.outputs["shortlist_csv"].read_bytes() == local.outputs["shortlist_csv"].read_bytes()
    # The units really ran on the cluster's workers.
    with distributed.Client(cluster.scheduler_address) as client:
        assert len(client.scheduler_info()["workers"]) == 2
        log = client.run_on_scheduler(lambda dask_scheduler: len(dask_scheduler.transition_log))
    assert log > 0
    assert store_status(dask_folder / "results").state == "complete"


def test_dask_job_resumes_a_store_started_locally(tmp_path, cluster):
    """A job stopped on the local backend continues on the cluster (run settings may change on resume)."""
    spec = _job(tmp_path, 'time_budget = "0.001s"\n')
    first = _run(spec, resume=True, progress=False, engine=TablesEngine())
    assert not first.complete and "time budget" in first.stopped_by
    on_dask = _run(spec.with_settings(time_budget=None, workers=2, backend="dask", scheduler=cluster.scheduler_address),
                   resume=True, progress=False, engine=TablesEngine())
    assert on_dask.complete and on_dask.units_resumed == first.units_done


def test_unreachable_scheduler_is_one_clear_error(tmp_path):
    import socket

    from selectkit.errors import OptionError
    from selectkit.jobs import runner

    with socket.socket() as probe:  # a free port nobody listens on
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    spec = _job(tmp_path, f'backend = "dask"\nscheduler = "tcp://127.0.0.1:{port}"\n')
    with pytest.raises(OptionError, match="cannot reach the Dask scheduler"):
        runner._check_dask(spec.scheduler, timeout=2)
    with pytest.raises(OptionError, match="needs the address of a scheduler"):
        _run(spec.with_settings(scheduler=None), resume=True, progress=False, engine=TablesEngine())
    assert not (tmp_path / "results").exists()  # refused before the store was made
