"""The plan a runner executes: each analysis' command, environment, seed, timeout and declared outputs."""

from __future__ import annotations

import os
import shlex
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

from holotype.config import Analysis, Config
from holotype.seeds import ANALYSIS_VARIABLE, PROJECT_SEED_VARIABLE, SEED_VARIABLE, derive_seed
from holotype.threads import THREAD_VARIABLES, threadpoolctl_folder

# what a dry run shows of the environment: holotype's own variables and these
SHOWN_VARIABLES = ("PYTHONHASHSEED", "VIRTUAL_ENV", "PYTHONPATH", "SOURCE_DATE_EPOCH", *THREAD_VARIABLES)


def hook_folder() -> str:
    """The folder holding holotype's sitecustomize: seed_globals and the run-time report of what was used."""
    return str(resources.files("holotype.run").joinpath("hook"))


def analysis_environment(config: Config, python: str, analysis: Analysis, project_seed: int,
                         epoch: int | None = None) -> dict[str, str]:
    """The variables an analysis process sees: as if its environment were activated, plus seeds.

    SOURCE_DATE_EPOCH is the record's (`epoch`), so tools that honour it (matplotlib's PDF, SVG and PS
    writers, LaTeX, many documentation tools) stamp the same date at every run; one set in holotype's own
    environment wins. HOLOTYPE_SVG_SALT fixes matplotlib's SVG id salt (the start-up hook applies it)."""
    env = dict(os.environ)
    for name in ("HOLOTYPE_HIDE_MODULES", "HOLOTYPE_HIDE_DISTS"):
        env.pop(name, None)  # only a pinpoint candidate takes packages away (run/overlays.py sets them)
    if epoch is not None and "SOURCE_DATE_EPOCH" not in env:
        env["SOURCE_DATE_EPOCH"] = str(epoch)
    env["HOLOTYPE_SVG_SALT"] = f"holotype-{project_seed}-{analysis.name}"
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
    env["HOLOTYPE_SEED_GLOBALS"] = "1" if config.seed_globals else "0"
    env["PYTHONPATH"] = hook_folder() + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    folder = threadpoolctl_folder()
    if folder:
        env["HOLOTYPE_THREADPOOLCTL"] = folder
    env["HOLOTYPE_SEEDS_FILE"] = str(resources.files("holotype").joinpath("seeds.py"))
    return env


def command_for(command: str, python: str) -> list[str]:
    """Split the command like a shell would (no shell); a leading `python` means the target interpreter."""
    argv = shlex.split(command)
    if argv and argv[0] in ("python", "python3"):
        argv[0] = python
    return argv


@dataclass(frozen=True)
class Step:
    """One analysis as a runner sees it."""

    name: str
    command: str
    argv: tuple[str, ...]
    env: dict[str, str] = field(repr=False)
    cwd: Path
    seed: int
    timeout: float | None
    outputs: tuple[str, ...]
    after: tuple[str, ...] = ()  # steps whose outputs this one reads
    split_error: str | None = None  # the command could not be split; the runner reports it, runs nothing

    def shown_variables(self) -> dict[str, str]:
        return {k: self.env[k] for k in sorted(self.env) if k.startswith("HOLOTYPE_") or k in SHOWN_VARIABLES}


@dataclass(frozen=True)
class Plan:
    """Steps in a valid run order (every step after the steps it reads from)."""

    steps: tuple[Step, ...]
    python: str
    project_seed: int

    @property
    def names(self) -> list[str]:
        return [s.name for s in self.steps]


def make_plan(config: Config, python: str, analyses: list[Analysis], project_seed: int,
              epoch: int | None = None) -> Plan:
    """The plan for `analyses` (already in run order, as Config.select gives them)."""
    producer = {out: a.name for a in config.analyses for out in a.outputs}
    steps = []
    for a in analyses:
        try:
            argv, error = tuple(command_for(a.command, python)), None
        except ValueError as exc:
            argv, error = (), f"cannot split the command: {exc}"
        after = tuple(dict.fromkeys(producer[i] for i in a.inputs if i in producer and producer[i] != a.name))
        steps.append(Step(a.name, a.command, argv, analysis_environment(config, python, a, project_seed, epoch),
                          Path(config.root), derive_seed(project_seed, a.name), a.timeout, a.outputs, after, error))
    return Plan(tuple(steps), python, project_seed)
