"""`holotype pinpoint` on sixteen changed packages with one culprit, against its bound.

An environment of sixteen invented packages (built here as wheels, offline) is recorded at 1.0, then all
sixteen are upgraded to 2.0; only lake-pkg-11 2.0 changes the computed value. The analysis takes about a
second (it sleeps 0.9 s after importing the packages, so the time is the same on every machine).

The bound is (ceil(log2 16) + 2) x one replay of that analysis + the one-time install of the recorded
versions of the changed packages (each with its own `pip install --no-deps --target`, as pinpoint does;
the wheels lie in a local folder, so this is the warm-cache case). The benchmark prints the ratio of
pinpoint's total time to that bound, and the number of candidate runs.

Run: python benchmarks/bench_pinpoint.py
"""

from __future__ import annotations

import math
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

from _timing import WORK, ratio_line

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from conftest import build_wheel  # noqa: E402  (the tests' offline wheel builder)

COUNT, CULPRIT = 16, 11
NAMES = [f"lake-pkg-{i:02d}" for i in range(1, COUNT + 1)]


def _seconds(argv: list[str], env: dict[str, str] | None = None, ok: tuple[int, ...] = (0,)) -> tuple[float, str]:
    start = time.perf_counter()
    proc = subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, env=env)
    if proc.returncode not in ok:
        raise SystemExit(f"{' '.join(argv[:4])} … exited {proc.returncode}: {proc.stderr[-2000:]}")
    return time.perf_counter() - start, proc.stderr


def main() -> None:
    base = WORK / "pinpoint"
    shutil.rmtree(base, ignore_errors=True)
    wheels, project = base / "wheels", base / "project"
    for i, name in enumerate(NAMES, 1):
        build_wheel(wheels, name, "1.0", module_text="FACTOR = 1.0\n")
        build_wheel(wheels, name, "2.0", module_text="FACTOR = 1.5\n" if i == CULPRIT else "FACTOR = 1.0\n")
    venv = base / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True)
    python = venv / "bin" / "python"
    pip = [str(python), "-m", "pip", "install", "-q", "--disable-pip-version-check", "--no-index",
           "--find-links", str(wheels)]
    subprocess.run([*pip, *(f"{n}==1.0" for n in NAMES)], check=True)
    modules = [n.replace("-", "_") for n in NAMES]
    (project / "data").mkdir(parents=True)
    (project / "data" / "lakes.csv").write_text("lake,depth\nnorth,2.5\n")
    (project / "run.py").write_text(
        "import json, os, time\n" + "".join(f"import {m}\n" for m in modules) + "value = 0.25\n" +
        "".join(f"value *= {m}.FACTOR\n" for m in modules) + "time.sleep(0.9)  # the analysis' own work\n"
        "os.makedirs('results', exist_ok=True)\njson.dump({'value': value}, open('results/value.json', 'w'))\n")
    (project / "holotype.toml").write_text(f'python = "{python}"\ndata = ["data"]\nseed = 3\n\n[analyses.value]\n'
                                           'command = "python run.py"\noutputs = ["results/value.json"]\n')
    holotype = [sys.executable, "-m", "holotype"]
    env = {**os.environ, "HOLOTYPE_CACHE_DIR": str(base / "cache")}
    _seconds([*holotype, "record", "--quiet", "-C", str(project)], env)
    subprocess.run([*pip, "--upgrade", *(f"{n}==2.0" for n in NAMES)], check=True)
    replay, _ = _seconds([*holotype, "replay", "--quiet", "-C", str(project)], env, ok=(1,))
    installs = 0.0
    for name in NAMES:
        took, _ = _seconds([str(python), "-m", "pip", "install", "-q", "--disable-pip-version-check", "--no-deps",
                            "--no-compile", "--target", str(base / "by-hand" / name), "--no-index", "--find-links",
                            str(wheels), f"{name}==1.0"])
        installs += took
    total, err = _seconds([*holotype, "pinpoint", "-C", str(project), "--no-index", "--find-links", str(wheels)],
                          env, ok=(1,))
    runs = len([line for line in err.splitlines() if line.startswith("candidate run")])
    steps = math.ceil(math.log2(COUNT)) + 2
    bound = steps * replay + installs
    print(f"{COUNT} changed packages, one culprit (lake-pkg-{CULPRIT}); one replay {replay:.2f} s; one-time "
          f"install of the recorded versions {installs:.2f} s")
    print(f"candidate runs: {runs} (at most {steps} for one culprit)")
    print(ratio_line(f"pinpoint vs ({steps} x replay + installs)", total, bound, 1.0))


if __name__ == "__main__":
    main()
