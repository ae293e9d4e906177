"""Eight independent CPU-bound analyses (pure Python loops, threads = 1, about a second each):
`replay --jobs 2` and a two-worker Dask LocalCluster against `replay --jobs 1`, measured in the same run.
Also the overhead per analysis of the Dask path: the median time of empty analyses through it.

Targets (issue 19): --jobs 2 >= 1.7x faster than --jobs 1 on two cores; the LocalCluster >= 1.5x.
"""

from __future__ import annotations

import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path

from _timing import WORK

LOOPS = 9_000_000  # about a second of pure-Python work on this machine
BURN = f"import os\nn = 0\nfor i in range({LOOPS}):\n    n += i % 7\nos.makedirs('out', exist_ok=True)\n" \
       "open(f\"out/{os.environ['HOLOTYPE_ANALYSIS']}.txt\", 'w').write(str(n))\n"
EMPTY = ("import os\nos.makedirs('out', exist_ok=True)\n"
         "open(f\"out/{os.environ['HOLOTYPE_ANALYSIS']}.txt\", 'w').write('0')\n")


def project(root: Path, script: str, count: int) -> Path:
    shutil.rmtree(root, ignore_errors=True)
    (root / "data").mkdir(parents=True)
    (root / "data" / "d.csv").write_text("x\n1\n")
    (root / "work.py").write_text(script)
    lines = [f'python = "{sys.executable}"', 'data = ["data"]', "seed = 5", "threads = 1", ""]
    for i in range(count):
        lines += [f"[analyses.a{i}]", 'command = "python work.py"', f'outputs = ["out/a{i}.txt"]', ""]
    (root / "holotype.toml").write_text("\n".join(lines))
    holotype(root, "record", "--jobs", "2")
    return root


def holotype(root: Path, *args: str) -> float:
    start = time.perf_counter()
    subprocess.run([sys.executable, "-m", "holotype", *args, "-C", str(root), "--quiet"], check=True)
    return time.perf_counter() - start


def main() -> None:
    from distributed import LocalCluster

    burn = project(WORK / "parallel-burn", BURN, 8)
    serial = holotype(burn, "replay", "--jobs", "1")
    two = holotype(burn, "replay", "--jobs", "2")
    print(f"8 CPU-bound analyses: --jobs 1 {serial:.2f}s, --jobs 2 {two:.2f}s: speed-up {serial / two:.2f}x "
          f"(target >= 1.7x: {'meets' if serial / two >= 1.7 else 'MISSES'})")
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None,
                      silence_logs=40) as cluster:
        address = cluster.scheduler_address
        dask = holotype(burn, "replay", "--cluster", address)
        print(f"through a two-worker LocalCluster {dask:.2f}s: speed-up {serial / dask:.2f}x "
              f"(target >= 1.5x: {'meets' if serial / dask >= 1.5 else 'MISSES'})")
        empty = project(WORK / "parallel-empty", EMPTY, 16)
        local_empty = [holotype(empty, "replay", "--jobs", "1") for _ in range(3)]
        dask_empty = [holotype(empty, "replay", "--cluster", address) for _ in range(3)]
        per = (statistics.median(dask_empty) - statistics.median(local_empty)) / 16
        print(f"16 empty analyses: local --jobs 1 {statistics.median(local_empty):.2f}s, Dask "
              f"{statistics.median(dask_empty):.2f}s (medians of 3): Dask overhead about {per * 1000:.0f} ms "
              "per analysis beyond a local run (connecting to the scheduler included)")


if __name__ == "__main__":
    main()
