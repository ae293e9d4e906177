"""Progress displays: a byte bar while hashing, a live panel while analyses run. Terminal only."""

from __future__ import annotations

import threading
import time
from collections import deque

from rich.console import Console, Group
from rich.live import Live
from rich.progress import (
    BarColumn,
    DownloadColumn,
    Progress,
    SpinnerColumn,
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
            # no totals (workers digest whole folders, and count as they go): a bar without an end
            self.task = self.progress.add_task("hash", total=self.total or None, files="")
        assert self.task is not None
        shown = f"{files_done}/{self.files} files" if self.files else f"{files_done} files"
        self.progress.update(self.task, completed=nbytes, files=shown)

    def end(self) -> None:
        if self.progress is not None:
            self.progress.stop()
            self.progress = None


class AnalysisPanel:
    """Every running analysis with its elapsed time, a live tail of what they print, and each finished one
    with its duration. Safe to call from the runner's threads (output lines arrive from several at once)."""

    def __init__(self, console: Console, tail_lines: int = 6) -> None:
        self.console = console
        self.tail: deque[str] = deque(maxlen=tail_lines)
        self.running: dict[str, float] = {}
        self.done = 0
        self.total = 0
        self.live: Live | None = None
        self._lock = threading.Lock()

    def __rich__(self) -> Group:
        with self._lock:
            now = time.monotonic()
            lines = [Text(f"{self.done}/{self.total} analyses done", style="bold")]
            lines += [Text(f"  running {name}  {now - since:.1f}s") for name, since in self.running.items()]
            lines += [Text("  " + line[:160], style="dim") for line in self.tail]
        return Group(*lines)

    def started(self, name: str, index: int, total: int) -> None:
        with self._lock:
            self.total = total
            self.running[name] = time.monotonic()
        if self.live is None:
            self.live = Live(self, console=self.console, refresh_per_second=8, transient=True)
            self.live.start()

    def output(self, name: str, line: str) -> None:
        with self._lock:
            self.tail.append(f"{name}: {line}" if len(self.running) > 1 else line)

    def finished(self, name: str, ok: bool, seconds: float) -> None:
        with self._lock:
            self.running.pop(name, None)
            self.done += 1
        mark = "[green]✓[/]" if ok else "[red]✗[/]"
        self.console.print(f"{mark} {name} ({seconds:.1f}s)")

    def close(self) -> None:
        if self.live is not None:
            self.live.stop()
            self.live = None


class SearchBar:
    """pinpoint: the candidate runs done, the most the search may still need (its budget), and what the
    current candidate holds at the record. Other messages (installs, full environments) print above it."""

    def __init__(self, console: Console) -> None:
        self.console = console
        self.progress: Progress | None = None
        self.task: TaskID | None = None

    def run(self, done: int, left: int, text: str) -> None:
        if self.progress is None:
            self.progress = Progress(SpinnerColumn(), TextColumn("candidate runs"), BarColumn(),
                                     TextColumn("{task.completed} done, at most {task.fields[left]} left"),
                                     TimeElapsedColumn(), TextColumn("{task.description}"),
                                     console=self.console, transient=True)
            self.progress.start()
            self.task = self.progress.add_task(text, total=done + left, left=left)
        assert self.task is not None
        self.progress.update(self.task, completed=done - 1, total=done + left, left=left, description=text)

    def say(self, text: str) -> None:
        self.console.print(text, markup=False, highlight=False)

    def close(self) -> None:
        if self.progress is not None:
            self.progress.stop()
            self.progress = None
