"""Shared timing helpers for the benchmark scripts: medians of repeated runs and child peak memory."""

from __future__ import annotations

import statistics
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

WORK = Path(__file__).resolve().parent / "work"


def compile_holotype() -> None:
    """Write holotype's bytecode, as `pip install` does for an installed copy. An editable checkout run with
    PYTHONDONTWRITEBYTECODE set (some shells and CI images set it) compiles every module it imports from
    source on every run, in the main process and in each worker: 0.2 s of a 1.1 s first record here."""
    import compileall

    import holotype

    compileall.compile_dir(Path(holotype.__file__).parent, quiet=1)


compile_holotype()  # every benchmark measures holotype as installed


def median_seconds(action: Callable[[], object], repeat: int = 5) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def run_quiet(argv: list[str], **kwargs: object) -> None:
    subprocess.run(argv, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, **kwargs)  # type: ignore[call-overload]


def wall_and_peak(argv: list[str]) -> tuple[float, float]:
    """Wall seconds and peak resident memory (MiB) of one command, measured by a fresh wrapper process."""
    wrapper = ("import resource, subprocess, sys, time, json\n"
               "t = time.perf_counter()\n"
               "subprocess.run(sys.argv[1:], check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)\n"
               "print(json.dumps([time.perf_counter() - t, "
               "resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024]))")
    out = subprocess.run([sys.executable, "-c", wrapper, *argv], check=True, capture_output=True, text=True)
    import json

    wall, peak = json.loads(out.stdout)
    return float(wall), float(peak)


def ratio_line(label: str, ours: float, baseline: float, target: float, unit: str = "s") -> str:
    r = ours / baseline
    verdict = "meets" if r <= target else "MISSES"
    return f"{label}: {ours:.4f}{unit} vs {baseline:.4f}{unit} = {r:.3f}x (target <= {target}x: {verdict})"
