"""`holotype check` (cached, and --full) on a ~100-package environment vs the installer's freeze listing;
CLI start-up vs typer+rich.

Run: python benchmarks/bench_environment.py [--python PATH]
(PATH: the analysis interpreter to inspect, e.g. a venv with numpy, scipy, pandas, matplotlib, statsmodels,
scikit-learn and jupyter; default this interpreter.) Bytecode writing is switched on for every timed command,
so neither side pays for compiling its own modules on each start.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
from pathlib import Path

from _timing import WORK, median_seconds, ratio_line, run_quiet


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--python", default=sys.executable)
    target = parser.parse_args().python
    os.environ.pop("PYTHONDONTWRITEBYTECODE", None)
    project = WORK / "env-project"
    shutil.rmtree(project, ignore_errors=True)
    (project / "analysis").mkdir(parents=True)
    (project / "analysis" / "fit.py").write_text("import numpy\nimport packaging\n")
    (project / "holotype.toml").write_text(f'python = "{target}"\nseed = 1\n')
    holotype = [sys.executable, "-m", "holotype"]
    run_quiet([*holotype, "record", "--no-run", "-C", str(project)])
    count = len(subprocess.run([target, "-m", "pip", "freeze", "--all"], capture_output=True,
                               text=True).stdout.splitlines())
    print(f"environment: {target} with {count} distributions")

    run_quiet([*holotype, "check", "-C", str(project)])  # the stat cache fills once
    check = median_seconds(lambda: run_quiet([*holotype, "check", "-C", str(project)]))
    full = median_seconds(lambda: run_quiet([*holotype, "check", "--full", "-C", str(project)]))
    freeze = median_seconds(lambda: run_quiet([target, "-m", "pip", "freeze"]))
    print(ratio_line("holotype check vs pip freeze", check, freeze, 1.0))
    print(ratio_line("holotype check --full (every installed byte) vs pip freeze", full, freeze, 3.0))

    framework = median_seconds(lambda: run_quiet([sys.executable, "-c", "import typer, rich"]), repeat=9)
    # the console script itself (a version manager's shim on PATH would add its own start-up)
    script = Path(sys.executable).parent / "holotype"
    cli = [str(script)] if script.exists() else holotype
    version = median_seconds(lambda: run_quiet([*cli, "--version"]), repeat=9)
    helptext = median_seconds(lambda: run_quiet([*cli, "--help"]), repeat=9)
    print(ratio_line("holotype --version vs import typer+rich", version, framework, 1.2))
    print(ratio_line("holotype --help vs import typer+rich", helptext, framework, 1.5))


if __name__ == "__main__":
    main()
