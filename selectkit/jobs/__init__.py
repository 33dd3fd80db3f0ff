"""Overnight jobs: a TOML job file, a SQLite run store, checkpoint and resume.

::

    from selectkit.jobs import load_job, run_job, store_status
    spec = load_job("bays.toml")          # checked before any work starts
    outcome = run_job(spec)               # commits every work unit as it finishes
    print(store_status(spec.output).render())   # from any shell, while it runs

A job killed at any moment continues with ``run_job(spec)`` (or
``resume_job(folder)``) and ends with the same shortlist as an uninterrupted
run.  See ``docs/overnight-jobs.md``.
"""

from .progress import JobProgress
from .runner import JobOutcome, extend_job, resume_job, run_job
from .spec import JobSpec, load_job, parse_duration, parse_job
from .starter import starter_job
from .status import StoreStatus, store_status
from .store import STORE_NAME, RunStore, data_fingerprint

__all__ = [
    "JobSpec",
    "extend_job",
    "load_job",
    "parse_job",
    "parse_duration",
    "starter_job",
    "run_job",
    "resume_job",
    "JobOutcome",
    "JobProgress",
    "store_status",
    "StoreStatus",
    "RunStore",
    "STORE_NAME",
    "data_fingerprint",
]
