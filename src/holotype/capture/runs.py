"""Run declared analyses in a controlled way: target environment, seeds, fixed threads, timeout, logs."""

from __future__ import annotations

import os
import shlex
import signal
import subprocess
import threading
import time
from collections import deque
from collections.abc import Iterator
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import IO, Protocol, TextIO

from holotype.baselines import STORE_FOLDER
from holotype.config import Analysis, Config
from holotype.seeds import ANALYSIS_VARIABLE, PROJECT_SEED_VARIABLE, SEED_VARIABLE, derive_seed

THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS",
                    "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")
LOG_FOLDER = "logs"
TAIL_LINES = 12


class RunProgress(Protocol):
    def started(self, name: str, index: int, total: int) -> None: ...
    def output(self, name: str, line: str) -> None: ...
    def finished(self, name: str, ok: bool, seconds: float) -> None: ...


@dataclass
class RunResult:
    analysis: Analysis
    seed: int
    returncode: int | None
    seconds: float
    timed_out: bool
    log: Path
    tail: list[str] = field(default_factory=list)
    outputs: dict[str, bytes] = field(default_factory=dict)
    missing: list[str] = field(default_factory=list)
    error: str | None = None

    @property
    def ok(self) -> bool:
        return self.error is None and self.returncode == 0 and not self.timed_out and not self.missing

    def failure_text(self) -> str:
        if self.error:
            return self.error
        tail = " | ".join(line.strip() for line in self.tail[-3:] if line.strip())
        if self.timed_out:
            return f"timed out after {self.analysis.timeout:g}s" + (f"; last output: {tail}" if tail else "")
        if self.returncode != 0:
            return f"exited with code {self.returncode}" + (f": {tail}" if tail else "")
        return "did not write " + ", ".join(self.missing)


def seeding_folder() -> str:
    """The folder holding holotype's sitecustomize for seed_globals."""
    return str(resources.files("holotype.capture").joinpath("seeding"))


def analysis_environment(config: Config, python: str, analysis: Analysis, project_seed: int) -> dict[str, str]:
    """The variables an analysis process sees: as if its environment were activated, plus seeds."""
    env = dict(os.environ)
    bindir = Path(python).parent
    venv = bindir.parent
    if (venv / "pyvenv.cfg").exists():
        env["VIRTUAL_ENV"] = str(venv)
        env.pop("PYTHONHOME", None)
    env["PATH"] = str(bindir) + os.pathsep + env.get("PATH", "")
    seed = derive_seed(project_seed, analysis.name)
    env[SEED_VARIABLE] = str(seed)
    env[PROJECT_SEED_VARIABLE] = str(project_seed)
    env[ANALYSIS_VARIABLE] = analysis.name
    env["PYTHONHASHSEED"] = str(seed)
    if config.threads is not None:
        for name in THREAD_VARIABLES:
            env[name] = str(config.threads)
    if config.seed_globals:
        env["PYTHONPATH"] = seeding_folder() + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return env


def command_for(run: str, python: str) -> list[str]:
    """Split the command like a shell would (no shell); a leading `python` means the target interpreter."""
    argv = shlex.split(run)
    if argv and argv[0] in ("python", "python3"):
        argv[0] = python
    return argv


def run_each(config: Config, python: str, analyses: list[Analysis], project_seed: int,
             progress: RunProgress | None = None) -> Iterator[RunResult]:
    """Run analyses one after another, telling the progress display; yields each result as it finishes."""
    for index, analysis in enumerate(analyses):
        if progress is not None:
            progress.started(analysis.name, index, len(analyses))
        result = run_analysis(config, python, analysis, project_seed, progress=progress)
        if progress is not None:
            progress.finished(analysis.name, result.ok, result.seconds)
        yield result


def _stamp(path: Path) -> tuple[int, int, int, int] | None:
    try:
        st = os.stat(path)
    except OSError:
        return None
    return (st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)


def _pump(stream: IO[bytes], log: TextIO, tail: deque[str], name: str, progress: RunProgress | None) -> None:
    """Copy the analysis' output to its log, the tail and the progress display, line by line."""
    for raw in iter(stream.readline, b""):
        line = raw.decode("utf-8", "replace").rstrip("\r\n")
        log.write(line + "\n")
        tail.append(line)
        if progress is not None:
            progress.output(name, line)
    stream.close()


def run_analysis(config: Config, python: str, analysis: Analysis, project_seed: int, *,
                 progress: RunProgress | None = None, log_suffix: str = "") -> RunResult:
    """Run one analysis from the project root and collect its declared outputs."""
    root = Path(config.root)
    log_dir = root / STORE_FOLDER / LOG_FOLDER
    log_dir.mkdir(parents=True, exist_ok=True)
    log_path = log_dir / f"{analysis.name}{log_suffix}.log"
    seed = derive_seed(project_seed, analysis.name)
    result = RunResult(analysis, seed, None, 0.0, False, log_path)
    try:
        argv = command_for(analysis.run, python)
    except ValueError as exc:
        result.error = f"cannot split the command: {exc}"
        return result
    before = {out: _stamp(root / out) for out in analysis.outputs}
    env = analysis_environment(config, python, analysis, project_seed)
    tail: deque[str] = deque(maxlen=TAIL_LINES)
    start = time.monotonic()
    try:
        with open(log_path, "w", encoding="utf-8", errors="replace") as log:
            log.write(f"# holotype: {analysis.name}: {shlex.join(argv)} (HOLOTYPE_SEED={seed})\n")
            log.flush()
            proc = subprocess.Popen(argv, cwd=root, env=env, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                                    stderr=subprocess.STDOUT, start_new_session=True)
            assert proc.stdout is not None
            reader = threading.Thread(target=_pump, args=(proc.stdout, log, tail, analysis.name, progress),
                                      daemon=True)
            reader.start()
            try:
                proc.wait(timeout=analysis.timeout)
            except subprocess.TimeoutExpired:
                result.timed_out = True
                try:
                    os.killpg(proc.pid, signal.SIGKILL)  # the whole process group: children too
                except (OSError, AttributeError):  # no process groups (Windows): the process itself
                    proc.kill()
            reader.join(timeout=5)
            result.returncode = proc.wait()
    except FileNotFoundError:
        result.error = f"command not found: {argv[0] if argv else '(empty)'}"
    except OSError as exc:
        result.error = f"cannot start '{analysis.run}': {exc.strerror}"
    result.seconds = time.monotonic() - start
    result.tail = list(tail)
    if result.error is None and not result.timed_out and result.returncode == 0:
        for out in analysis.outputs:
            stamp = _stamp(root / out)
            if stamp is None or stamp == before[out]:
                # absent, or left over from an earlier run: this run did not write it
                result.missing.append(out)
                continue
            try:
                result.outputs[out] = (root / out).read_bytes()
            except OSError:
                result.missing.append(out)
    return result
