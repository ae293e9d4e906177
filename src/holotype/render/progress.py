"""Progress displays: a byte bar while hashing, a live panel while analyses run. Terminal only."""

from __future__ import annotations

import time
from collections import deque

from rich.console import Console, Group
from rich.live import Live
from rich.progress import (
    BarColumn,
    DownloadColumn,
    MofNCompleteColumn,
    Progress,
    TaskID,
    TextColumn,
    TimeElapsedColumn,
    TimeRemainingColumn,
    TransferSpeedColumn,
)
from rich.text import Text

SHOW_AFTER_SECONDS = 1.0


class HashBar:
    """Shows bytes, files, rate and time left once hashing has taken longer than about a second."""

    def __init__(self, console: Console) -> None:
        self.console = console
        self.progress: Progress | None = None
        self.task: TaskID | None = None
        self.started = 0.0
        self.files = 0
        self.total = 0

    def begin(self, files: int, total_bytes: int) -> None:
        self.started = time.monotonic()
        self.files, self.total = files, total_bytes

    def advance(self, nbytes: int, files_done: int) -> None:
        if self.progress is None:
            if time.monotonic() - self.started < SHOW_AFTER_SECONDS:
                return
            self.progress = Progress(TextColumn("hashing"), BarColumn(), DownloadColumn(), TransferSpeedColumn(),
                                     TextColumn("{task.fields[files]}"), TimeRemainingColumn(),
                                     console=self.console, transient=True)
            self.progress.start()
            self.task = self.progress.add_task("hash", total=self.total, files="")
        assert self.task is not None
        self.progress.update(self.task, completed=nbytes, files=f"{files_done}/{self.files} files")

    def end(self) -> None:
        if self.progress is not None:
            self.progress.stop()
            self.progress = None


class AnalysisPanel:
    """Names the running analysis, its elapsed time and a live tail of what it prints."""

    def __init__(self, console: Console, tail_lines: int = 6) -> None:
        self.console = console
        self.tail: deque[str] = deque(maxlen=tail_lines)
        self.progress = Progress(TextColumn("[bold]{task.description}"), BarColumn(), MofNCompleteColumn(),
                                 TimeElapsedColumn(), console=console)
        self.task = self.progress.add_task("analyses", total=None)
        self.live: Live | None = None

    def _view(self) -> Group:
        lines = [Text("  " + line[:160], style="dim") for line in self.tail]
        return Group(self.progress, *lines)

    def started(self, name: str, index: int, total: int) -> None:
        if self.live is None:
            self.live = Live(self._view(), console=self.console, refresh_per_second=8, transient=True)
            self.live.start()
        self.tail.clear()
        self.progress.reset(self.task, total=total, completed=index, description=f"running {name}")

    def output(self, name: str, line: str) -> None:
        self.tail.append(line)
        if self.live is not None:
            self.live.update(self._view())

    def finished(self, name: str, ok: bool, seconds: float) -> None:
        self.progress.advance(self.task)
        mark = "[green]✓[/]" if ok else "[red]✗[/]"
        self.console.print(f"{mark} {name} ({seconds:.1f}s)")

    def close(self) -> None:
        if self.live is not None:
            self.live.stop()
            self.live = None
