"""The runner seam: a runner takes a plan and returns one result per step, in plan order.

`LocalRunner` runs analyses as processes on this machine, `jobs` at a time (1: one after
another, exactly in plan order); `run/cluster.py` submits them to a Dask cluster. Both go through
`schedule.run_in_order`, so dependency order, events and result order are the same everywhere.
"""

from __future__ import annotations

import os
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Protocol

from holotype.records import RunResult
from holotype.run.events import RunEvents
from holotype.run.plan import Plan, Step
from holotype.run.process import LIVE, run_step
from holotype.run.schedule import run_in_order
from holotype.store import ProjectStore


class Runner(Protocol):
    def run(self, plan: Plan, events: RunEvents | None = None, *, log_suffix: str = "") -> list[RunResult]: ...
    def close(self) -> None: ...


def usable_cpus() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def default_jobs(threads: int | None) -> int:
    """The usable CPUs divided by each analysis' thread count, at least 1."""
    return max(1, usable_cpus() // max(1, threads or 1))


class LocalRunner:
    """Analyses as processes on this machine, up to `jobs` at once, each after the analyses it reads from."""

    def __init__(self, store: ProjectStore, jobs: int = 1) -> None:
        self.store = store
        self.jobs = max(1, jobs)

    def run(self, plan: Plan, events: RunEvents | None = None, *, log_suffix: str = "") -> list[RunResult]:
        with ThreadPoolExecutor(max_workers=self.jobs, thread_name_prefix="holotype-run") as pool:
            def submit(step: Step) -> Future[RunResult]:
                return pool.submit(run_step, step, self.store.log_path(step.name, log_suffix), events)

            return run_in_order(plan, submit, self.jobs, events, LIVE.stop_all)

    def close(self) -> None:
        pass


def make_runner(store: ProjectStore, *, jobs: int | None, threads: int | None, cluster: str | None,
                digest_file: str) -> Runner:
    """A cluster runner when a scheduler is named (option or config), else a local one with `jobs` at once."""
    if cluster:
        from holotype.run.cluster import ClusterRunner, connect

        return ClusterRunner(store, connect(cluster), digest_file, jobs)
    return LocalRunner(store, jobs if jobs is not None else default_jobs(threads))
