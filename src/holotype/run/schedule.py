"""Dependency order for any executor: start every step whose inputs are ready, up to `jobs` at once.

Works with anything that has `submit(fn, *args) -> concurrent.futures.Future`: a thread pool for
local runs, a Dask client's executor for a cluster. Results come back in plan order whatever the
completion order, and each result notes outputs of *other* analyses that changed while it ran.
"""

from __future__ import annotations

import concurrent.futures as cf
import signal
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from holotype.records import RunResult
from holotype.run.events import RunEvents
from holotype.run.plan import Plan, Step
from holotype.run.process import Stamp, stamp

Submit = Callable[[Step], "cf.Future[RunResult]"]


@contextmanager
def sigterm_as_interrupt() -> Iterator[None]:
    """While analyses run, SIGTERM stops holotype the way Ctrl-C does (so children are stopped too)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum: int, frame: Any) -> None:
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def run_in_order(plan: Plan, submit: Submit, jobs: int, events: RunEvents | None,
                 on_interrupt: Callable[[], None]) -> list[RunResult]:
    """Run the plan's steps through `submit`, at most `jobs` at once, each after the steps it reads from."""
    names = set(plan.names)
    owner = {out: s.name for s in plan.steps for out in s.outputs}
    root = plan.steps[0].cwd if plan.steps else Path(".")
    pending = list(plan.steps)
    done: dict[str, RunResult] = {}
    running: dict[cf.Future[RunResult], tuple[Step, float, dict[str, Stamp]]] = {}
    spans: dict[str, tuple[float, float]] = {}
    index = 0
    try:
        with sigterm_as_interrupt():
            while pending or running:
                for step in list(pending):
                    if len(running) >= max(1, jobs):
                        break
                    if all(dep in done or dep not in names for dep in step.after):
                        pending.remove(step)
                        if events is not None:
                            events.started(step.name, index, len(plan.steps))
                        index += 1
                        others = {out: stamp(root / out) for out, who in owner.items() if who != step.name}
                        running[submit(step)] = (step, time.monotonic(), others)
                if not running:  # cannot happen with a valid plan; never spin
                    raise RuntimeError("no step can start: the plan's order is inconsistent")
                finished, _ = cf.wait(running, return_when=cf.FIRST_COMPLETED)
                for fut in sorted(finished, key=lambda f: plan.names.index(running[f][0].name)):
                    step, began, others = running.pop(fut)
                    result = fut.result()
                    ended = time.monotonic()
                    spans[step.name] = (began, ended)
                    result.wrote_others = _foreign_writes(root, step.name, others, owner, spans, began, ended,
                                                          {s.name for s, _, _ in running.values()})
                    done[step.name] = result
                    if events is not None:
                        events.finished(step.name, result.ok, result.seconds)
    except BaseException:
        for fut in running:
            fut.cancel()
        on_interrupt()
        raise
    return [done[s.name] for s in plan.steps]


def _foreign_writes(root: Path, name: str, before: dict[str, Stamp], owner: dict[str, str],
                    spans: dict[str, tuple[float, float]], began: float, ended: float,
                    still_running: set[str]) -> list[tuple[str, str]]:
    """Outputs declared by another analysis that changed while `name` ran and their owner did not run."""
    found = []
    for out, then in before.items():
        if stamp(root / out) == then:
            continue
        who = owner[out]
        span = spans.get(who)
        overlapped = who in still_running or (span is not None and span[0] < ended and span[1] > began)
        if not overlapped:
            found.append((out, who))
    return found
