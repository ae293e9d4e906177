"""Run one step in a controlled way: its own process group, a timeout, a log, outputs digested at the end."""

from __future__ import annotations

import hashlib
import os
import shlex
import signal
import subprocess
import threading
import time
from collections import deque
from pathlib import Path
from typing import IO, TextIO

from holotype.records import ProducedOutput, RunResult
from holotype.run.events import RunEvents
from holotype.run.plan import Step

TAIL_LINES = 12
GRACE_SECONDS = 3.0  # between TERM and KILL when holotype stops a group


class LiveGroups:
    """The process groups of analyses running now in this process, so an interrupt can stop them all."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._procs: dict[int, subprocess.Popen[bytes]] = {}

    def add(self, proc: subprocess.Popen[bytes]) -> None:
        with self._lock:
            self._procs[proc.pid] = proc

    def discard(self, proc: subprocess.Popen[bytes]) -> None:
        with self._lock:
            self._procs.pop(proc.pid, None)

    def stop_all(self) -> None:
        """TERM every live group, then KILL what is left after a grace period."""
        with self._lock:
            procs = list(self._procs.values())
        for proc in procs:
            _signal_group(proc, signal.SIGTERM)
        deadline = time.monotonic() + GRACE_SECONDS
        for proc in procs:
            try:
                proc.wait(timeout=max(0.0, deadline - time.monotonic()))
            except subprocess.TimeoutExpired:
                pass
            _signal_group(proc, signal.SIGKILL)


LIVE = LiveGroups()


def _stamp(path: Path) -> tuple[int, int, int, int] | None:
    try:
        st = os.stat(path)
    except OSError:
        return None
    return (st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)


def _pump(stream: IO[bytes], log: TextIO, tail: deque[str], name: str, events: RunEvents | None) -> None:
    """Copy the analysis' output to its log, the tail and the progress display, line by line."""
    for raw in iter(stream.readline, b""):
        line = raw.decode("utf-8", "replace").rstrip("\r\n")
        log.write(line + "\n")
        tail.append(line)
        if events is not None:
            events.output(name, line)
    stream.close()


def _signal_group(proc: subprocess.Popen[bytes], sig: int) -> None:
    try:
        os.killpg(proc.pid, sig)  # the whole process group: children too
    except ProcessLookupError:
        pass
    except (OSError, AttributeError):  # no process groups (Windows): the process itself
        if sig == signal.SIGKILL:
            proc.kill()
        else:
            proc.terminate()


def collect_outputs(step: Step, before: dict[str, tuple[int, int, int, int] | None], result: RunResult) -> None:
    """Digest each declared output the run wrote (absent or untouched since before the run: not written)."""
    for out in step.outputs:
        path = step.cwd / out
        stamp = _stamp(path)
        if stamp is None or stamp == before[out]:
            result.missing.append(out)
            continue
        try:
            data = path.read_bytes()
        except OSError:
            result.missing.append(out)
            continue
        result.outputs[out] = ProducedOutput(out, hashlib.sha256(data).hexdigest(), len(data), data)


def run_step(step: Step, log_path: Path, events: RunEvents | None = None) -> RunResult:
    """Run one analysis from the project root and collect its declared outputs."""
    result = RunResult(step.name, step.command, step.seed, log_path, step.timeout)
    if step.split_error is not None:
        result.error = step.split_error
        return result
    before = {out: _stamp(step.cwd / out) for out in step.outputs}
    tail: deque[str] = deque(maxlen=TAIL_LINES)
    start = time.monotonic()
    try:
        with open(log_path, "w", encoding="utf-8", errors="replace") as log:
            log.write(f"# holotype: {step.name}: {shlex.join(step.argv)} (HOLOTYPE_SEED={step.seed})\n")
            log.flush()
            proc = subprocess.Popen(list(step.argv), cwd=step.cwd, env=step.env, stdin=subprocess.DEVNULL,
                                    stdout=subprocess.PIPE, stderr=subprocess.STDOUT, start_new_session=True)
            LIVE.add(proc)
            try:
                assert proc.stdout is not None
                reader = threading.Thread(target=_pump, args=(proc.stdout, log, tail, step.name, events),
                                          daemon=True)
                reader.start()
                try:
                    proc.wait(timeout=step.timeout)
                except subprocess.TimeoutExpired:
                    result.timed_out = True
                    _signal_group(proc, signal.SIGKILL)
                except BaseException:  # Ctrl-C or SIGTERM while waiting: the analysis must not outlive holotype
                    LIVE.stop_all()
                    raise
                reader.join(timeout=5)
                result.returncode = proc.wait()
            finally:
                LIVE.discard(proc)
    except FileNotFoundError:
        result.error = f"command not found: {step.argv[0] if step.argv else '(empty)'}"
    except OSError as exc:
        result.error = f"cannot start '{step.command}': {exc.strerror}"
    result.seconds = time.monotonic() - start
    result.tail = list(tail)
    if result.error is None and not result.timed_out and result.returncode == 0:
        collect_outputs(step, before, result)
    return result
