"""Analyses as tasks on a Dask cluster (the optional extra `holotype[cluster]`).

holotype schedules nothing itself here: each step is submitted through `distributed.Client`'s
`concurrent.futures` executor, in the same dependency order as a local run. Workers must share
the project's filesystem (as on a typical HPC cluster): each task first checks that it sees the
project folder, the analysis interpreter and the same lock (or config) digest as the submitting
side, and the submitting side checks each output's digest again after the task returns.
"""

from __future__ import annotations

import concurrent.futures as cf
import hashlib
import os
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

from holotype.errors import HolotypeError
from holotype.records import ProducedOutput, RunResult
from holotype.run.events import RunEvents
from holotype.run.plan import Plan, Step
from holotype.run.schedule import run_in_order
from holotype.store import ProjectStore

EXTRA_HINT = "running on a cluster needs the optional extra: pip install 'holotype[cluster]'"
CONNECT_SECONDS = 30


class ClusterError(HolotypeError):
    """The cluster cannot be reached, or a worker does not see what the submitting side sees."""


@dataclass(frozen=True)
class Expected:
    """What a worker must see to run a step as the submitting side would."""

    root: str
    digest_file: str  # holotype.lock, or the config before the first record
    digest: str


def file_digest(path: Path) -> str:
    try:
        with open(path, "rb") as fh:
            return hashlib.file_digest(fh, "sha256").hexdigest()
    except OSError:
        return ""


def _worker_address() -> str:
    try:
        from distributed import get_worker

        return str(get_worker().address)
    except (ImportError, ValueError):
        return "a worker"


def run_on_worker(step: Step, log_path: str, expected: Expected) -> RunResult | str:
    """The task: check the worker's view, run the step, digest its outputs. A string is a refusal."""
    from holotype.run.process import run_step

    where = _worker_address()
    root = Path(expected.root)
    if not root.is_dir():
        return f"worker {where} does not see the project folder {root} (workers must share the project's filesystem)"
    seen = file_digest(root / expected.digest_file)
    if seen != expected.digest:
        return (f"worker {where} sees a different {expected.digest_file} in {root} (SHA-256 "
                f"{seen[:12] or 'unreadable'}…, the submitting side has {expected.digest[:12]}…)")
    exe = step.argv[0] if step.argv else ""
    if exe and os.sep in exe and not os.access(exe, os.X_OK):
        return f"worker {where} cannot run the analysis interpreter {exe}"
    result = run_step(step, Path(log_path))
    # the bytes stay on the shared filesystem; the submitting side reads them and checks the digests
    result.outputs = {k: replace(v, data=b"") for k, v in result.outputs.items()}
    return result


def _stop_worker_groups() -> None:
    from holotype.run.process import LIVE

    LIVE.stop_all()


def connect(address: str) -> Any:
    """A distributed.Client for a scheduler address (tcp://host:8786) or a scheduler file (.json)."""
    try:
        from distributed import Client
    except ImportError:
        raise ClusterError(EXTRA_HINT) from None
    try:
        if address.endswith(".json") or (os.path.isfile(address) and "://" not in address):
            return Client(scheduler_file=address, timeout=CONNECT_SECONDS)  # type: ignore[no-untyped-call]
        return Client(address, timeout=CONNECT_SECONDS)  # type: ignore[no-untyped-call]
    except (OSError, TimeoutError, ValueError) as exc:
        raise ClusterError(f"cannot reach the Dask scheduler at {address}: {exc}") from None


class ClusterRunner:
    """Each step as a task on a Dask cluster, in dependency order; up to `jobs` tasks at once."""

    def __init__(self, store: ProjectStore, client: Any, digest_file: str, jobs: int | None = None) -> None:
        self.store = store
        self.client = client
        self.digest_file = digest_file
        self.jobs = jobs

    def _capacity(self) -> int:
        if self.jobs:
            return self.jobs
        try:
            threads: dict[str, int] = self.client.nthreads()
            return max(1, sum(threads.values()))
        except (OSError, AttributeError, TypeError):
            return 1

    def expected(self) -> Expected:
        """What every worker must see: this project folder and the same lock (or config) bytes."""
        root = self.store.root.absolute()
        digest = file_digest(root / self.digest_file)
        if not digest:
            raise ClusterError(f"cannot read {root / self.digest_file} to tell workers what they must see")
        return Expected(str(root), self.digest_file, digest)

    def run(self, plan: Plan, events: RunEvents | None = None, *, log_suffix: str = "") -> list[RunResult]:
        expected = self.expected()
        executor = self.client.get_executor(pure=False)

        def submit(step: Step) -> cf.Future[RunResult]:
            log = str(self.store.log_path(step.name, log_suffix).absolute())
            remote = executor.submit(run_on_worker, step, log, expected)
            checked: cf.Future[RunResult] = cf.Future()

            def arrive(fut: cf.Future[RunResult | str]) -> None:
                try:
                    checked.set_result(self._verify(step, fut.result()))
                except BaseException as exc:  # the task failed or the worker refused: the caller sees it
                    checked.set_exception(exc)

            remote.add_done_callback(arrive)
            return checked

        def stop() -> None:
            try:
                self.client.run(_stop_worker_groups)
            except (OSError, TimeoutError, ValueError):
                pass

        return run_in_order(plan, submit, self._capacity(), events, stop)

    def close(self) -> None:
        try:
            self.client.close()
        except (OSError, TimeoutError, RuntimeError):
            pass

    def _verify(self, step: Step, answer: RunResult | str) -> RunResult:
        if isinstance(answer, str):
            raise ClusterError(answer)
        for out, produced in list(answer.outputs.items()):
            try:
                data = (step.cwd / out).read_bytes()
            except OSError as exc:
                raise ClusterError(f"{out}: written on the worker but unreadable here ({exc.strerror}); "
                                   "workers must share the project's filesystem") from None
            digest = hashlib.sha256(data).hexdigest()
            if digest != produced.sha256:
                raise ClusterError(f"{out}: the worker digested {produced.sha256[:12]}…, this side reads "
                                   f"{digest[:12]}… (the filesystem is not shared, or the file changed since)")
            answer.outputs[out] = ProducedOutput(out, digest, len(data), data)
        return answer
