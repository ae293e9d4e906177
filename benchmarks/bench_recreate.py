"""`holotype recreate` of a numpy + scipy + pandas environment from a local wheelhouse, against doing it by
hand: `python -m venv` plus `pip install --no-index --find-links DIR -r pins.txt` on the same wheels.

First recreate with an empty wheel cache, second with the cache warm (no --find-links needed). Both
include holotype's check of the new environment against the lock. The wheelhouse is fetched once from
the package index into benchmarks/work/ (pip download).

Run: python benchmarks/bench_recreate.py
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time

from _timing import WORK, ratio_line

PACKAGES = ("numpy", "scipy", "pandas")


def _seconds(argv: list[str], env: dict[str, str] | None = None) -> float:
    start = time.perf_counter()
    subprocess.run(argv, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    return time.perf_counter() - start


def main() -> None:
    wheels = WORK / "recreate-wheels"
    if not any(wheels.glob("*.whl")):
        subprocess.run([sys.executable, "-m", "pip", "download", "-q", "-d", str(wheels), *PACKAGES], check=True)
    project = WORK / "recreate-project"
    shutil.rmtree(project, ignore_errors=True)
    project.mkdir(parents=True)
    (project / "fit.py").write_text("import numpy, scipy, pandas\n")
    subprocess.run([sys.executable, "-m", "venv", str(project / ".venv")], check=True)
    subprocess.run([str(project / ".venv/bin/python"), "-m", "pip", "install", "-q", "--no-index", "--find-links",
                    str(wheels), *PACKAGES], check=True)
    (project / "holotype.toml").write_text('python = ".venv/bin/python"\nseed = 1\n')
    holotype = [sys.executable, "-m", "holotype"]
    subprocess.run([*holotype, "record", "--no-run", "--quiet", "-C", str(project)], check=True)
    pins = WORK / "recreate-pins.txt"
    pins.write_text(subprocess.run([*holotype, "pins", "-C", str(project)], check=True, capture_output=True,
                                   text=True).stdout)
    out = WORK / "recreate-out"
    shutil.rmtree(out, ignore_errors=True)
    out.mkdir()
    by_hand = _seconds(["sh", "-c", f"{sys.executable} -m venv {out}/hand && {out}/hand/bin/pip install -q "
                                    f"--disable-pip-version-check --no-index --find-links {wheels} -r {pins}"])
    env = {**os.environ, "HOLOTYPE_CACHE_DIR": str(out / "cache")}
    first = _seconds([*holotype, "recreate", str(out / "first"), "-C", str(project), "--find-links", str(wheels),
                      "--no-index", "--quiet"], env)
    second = _seconds([*holotype, "recreate", str(out / "second"), "-C", str(project), "--no-index", "--quiet"], env)
    count = len([line for line in pins.read_text().splitlines() if line and not line.startswith("#")])
    print(f"{count} locked packages ({', '.join(PACKAGES)} and their dependencies)")
    print(ratio_line("first recreate (empty wheel cache, check included) vs venv + pip install by hand", first,
                     by_hand, 1.0))
    print(ratio_line("second recreate (warm wheel cache, check included) vs venv + pip install by hand", second,
                     by_hand, 0.6))


if __name__ == "__main__":
    main()
