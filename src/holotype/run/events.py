"""What a progress display hears from a runner, keyed by analysis name."""

from __future__ import annotations

from typing import Protocol


class RunEvents(Protocol):
    def started(self, name: str, index: int, total: int) -> None: ...
    def output(self, name: str, line: str) -> None: ...
    def finished(self, name: str, ok: bool, seconds: float) -> None: ...
