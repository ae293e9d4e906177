"""The runner seam: a runner takes a plan and returns one result per step, in plan order.

The serial runner is the default. A parallel or cluster runner implements the same `run`,
keeps the same event calls (keyed by analysis name) and returns results in the same order.
"""

from __future__ import annotations

from typing import Protocol

from holotype.records import RunResult
from holotype.run.events import RunEvents
from holotype.run.plan import Plan
from holotype.run.process import run_step
from holotype.store import ProjectStore


class Runner(Protocol):
    def run(self, plan: Plan, events: RunEvents | None = None, *, log_suffix: str = "") -> list[RunResult]: ...


class SerialRunner:
    """One analysis after another, in plan order."""

    def __init__(self, store: ProjectStore) -> None:
        self.store = store

    def run(self, plan: Plan, events: RunEvents | None = None, *, log_suffix: str = "") -> list[RunResult]:
        results = []
        for index, step in enumerate(plan.steps):
            if events is not None:
                events.started(step.name, index, len(plan.steps))
            result = run_step(step, self.store.log_path(step.name, log_suffix), events)
            if events is not None:
                events.finished(step.name, result.ok, result.seconds)
            results.append(result)
        return results
