"""Run one step in a controlled way: its own process group, a timeout, a log, outputs digested at the end."""

from __future__ import annotations

import hashlib
import json
import os
import shlex
import signal
import subprocess
import threading
import time
from collections import deque
from pathlib import Path
from typing import IO, BinaryIO

from holotype.errors import InputError
from holotype.records import ProducedOutput, RunResult
from holotype.run.events import RunEvents
from holotype.run.plan import Step
from holotype.safe_files import inside, read_regular

TAIL_LINES = 12
TAIL_LINE_CHARS = 2000  # the most of one output line kept for messages (the log keeps everything)
CHUNK = 1 << 16
LOG_HEADER = ("# holotype: {name}: {argv} (HOLOTYPE_SEED={seed})\n"
              "# This log keeps what the analysis printed, unredacted; it stays out of version control "
              "(.holotype/.gitignore). holotype's reports redact secrets.\n")
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


Stamp = tuple[int, int, int, int] | None


def stamp(path: Path) -> Stamp:
    """What tells a write apart without reading the file: inode, size, mtime, ctime (None: absent)."""
    try:
        st = os.stat(path)
    except OSError:
        return None
    return (st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)


def _pump(stream: IO[bytes], log: BinaryIO, tail: deque[str], name: str, events: RunEvents | None) -> None:
    """Copy the analysis' output to its log as it comes, byte for byte, in bounded chunks (a line of
    gigabytes without a newline streams to the log too); keep the last lines, each at most TAIL_LINE_CHARS."""
    partial = b""
    while True:
        try:
            chunk = stream.read1(CHUNK)  # type: ignore[attr-defined]
        except (OSError, ValueError):
            break
        if not chunk:
            break
        try:
            log.write(chunk)
            log.flush()
        except (OSError, ValueError):  # disk full: the run goes on; the log says less
            pass
        *lines, partial = (partial + chunk).split(b"\n")
        if len(partial) > TAIL_LINE_CHARS:
            partial = partial[:TAIL_LINE_CHARS]
        for raw in lines:
            line = raw[:TAIL_LINE_CHARS].decode("utf-8", "replace").rstrip("\r")
            tail.append(line)
            if events is not None:
                events.output(name, line)
    if partial:
        tail.append(partial.decode("utf-8", "replace"))
    stream.close()


def _open_log(path: Path, result: RunResult) -> BinaryIO:
    """The analysis' log, created fresh; never written through a symbolic link. If it cannot be written
    (a read-only folder), the analysis still runs and the result says where its log is not."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_TRUNC | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_CLOEXEC", 0)
    try:
        return os.fdopen(os.open(path, flags, 0o644), "wb")
    except OSError as exc:
        result.log_problem = f"could not write {path}: {exc.strerror}"
        return open(os.devnull, "wb")


def _group_alive(pgid: int) -> bool:
    try:
        os.killpg(pgid, 0)
    except (ProcessLookupError, PermissionError, AttributeError):
        return False
    except OSError:
        return False
    return True


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


def collect_outputs(step: Step, before: dict[str, Stamp], result: RunResult) -> None:
    """Digest each declared output the run wrote (absent or untouched since before the run: not written)."""
    for out in step.outputs:
        path = step.cwd / out
        now = stamp(path)
        if now is None or now == before[out]:
            result.missing.append(out)
            continue
        if not inside(step.cwd, path):
            result.refused[out] = "leads outside the project through a symbolic link; refused"
            continue
        try:
            data = read_regular(path, what="the output")
        except InputError as exc:
            result.refused[out] = exc.detail
            continue
        result.outputs[out] = ProducedOutput(out, hashlib.sha256(data).hexdigest(), len(data), data)


def run_step(step: Step, log_path: Path, events: RunEvents | None = None) -> RunResult:
    """Run one analysis from the project root and collect its declared outputs."""
    result = RunResult(step.name, step.command, step.seed, log_path, step.timeout)
    if step.split_error is not None:
        result.error = step.split_error
        return result
    before = {out: stamp(step.cwd / out) for out in step.outputs}
    report = log_path.with_name(log_path.name.removesuffix(".log") + ".used.json")
    try:
        report.unlink()
    except OSError:
        pass
    env = {**step.env, "HOLOTYPE_RUN_REPORT": str(report)}
    tail: deque[str] = deque(maxlen=TAIL_LINES)
    start = time.monotonic()
    try:
        with _open_log(log_path, result) as log:
            log.write(LOG_HEADER.format(name=step.name, argv=shlex.join(step.argv), seed=step.seed).encode())
            log.flush()
            proc = subprocess.Popen(list(step.argv), cwd=step.cwd, env=env, stdin=subprocess.DEVNULL,
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
                result.returncode = proc.wait()
                if _group_alive(proc.pid):
                    # children that outlived the analysis (a daemon, a forgotten worker): stop them all
                    result.left_children = True
                    _signal_group(proc, signal.SIGTERM)
                    deadline = time.monotonic() + GRACE_SECONDS
                    while _group_alive(proc.pid) and time.monotonic() < deadline:
                        time.sleep(0.02)
                    _signal_group(proc, signal.SIGKILL)
                reader.join(timeout=GRACE_SECONDS)
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
    read_usage(report, result)
    return result


def read_usage(report: Path, result: RunResult) -> None:
    """What the run-time hook said the analysis process imported and loaded (nothing, if it said nothing)."""
    try:
        doc = json.loads(read_regular(report, limit=16 << 20))
    except (InputError, ValueError):
        return
    if not isinstance(doc, dict):
        return
    modules = doc.get("modules")
    if isinstance(modules, list):
        result.modules = tuple(str(m) for m in modules if isinstance(m, str))
    libraries = doc.get("libraries")
    if isinstance(libraries, list):
        result.libraries = tuple(dict(x) for x in libraries if isinstance(x, dict))
