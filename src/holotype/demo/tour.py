"""`holotype demo`: write the invented lake-survey project and walk through record, check, replay and four events."""

from __future__ import annotations

import json
import math
import sys
import time
from importlib import resources
from pathlib import Path

from rich.console import Console
from rich.rule import Rule
from rich.text import Text

from holotype.atomic import write_atomic
from holotype.commands.check import check_project
from holotype.commands.pinpoint import pinpoint_project
from holotype.commands.record import record_project
from holotype.commands.replay import replay_project
from holotype.demo.environment import build_demo_environment, can_build, install_libraries, wheel_folder
from holotype.demo.scenario import survey_csv
from holotype.errors import HolotypeError
from holotype.findings import Judgement
from holotype.render.terminal import FindingsTable
from holotype.standards.installer import InstallerOptions

SCRIPTS = ("summary", "tests", "pca")
PROJECT_SEED = 20261201

CONFIG = f"""\
# holotype configuration of the demo project: an invented lake survey.
@PYTHON@data = ["data"]
code = ["analysis"]
seed = {PROJECT_SEED}
threads = 1

[tolerance]
rtol = 1e-9
atol = 1e-12

# Principal components are defined only up to sign: a column may flip as a whole.
[[rules]]
match = "results/pca_loadings.csv:PC*"
sign_free = true

[[rules]]
match = "results/pca_scores.npy"
sign_free = true

[analyses.summary]
command = "python analysis/summary.py"
outputs = ["results/summary.csv"]
inputs = ["data/lakes.csv"]

[analyses.tests]
command = "python analysis/tests.py"
outputs = ["results/tests.json"]
inputs = ["data/lakes.csv"]

[analyses.pca]
command = "python analysis/pca.py"
outputs = ["results/pca_loadings.csv", "results/pca_variance.csv", "results/pca_scores.npy"]
inputs = ["data/lakes.csv"]
"""

# the analysis that uses the demo environment's invented libraries (demo/environment.py)
CLARITY = """
[analyses.clarity]
command = "python analysis/clarity.py"
outputs = ["results/clarity.csv"]
inputs = ["data/lakes.csv"]
"""

CLARITY_WORDS = ", and water clarity from turbidity (CSV) with three invented lake libraries"
SIGN_FLIP = "    u, s, vt = np.linalg.svd(z, full_matrices=False)\n"
SIGN_FLIP_AFTER = SIGN_FLIP + ("    vt[1] = -vt[1]  # as another LAPACK build may return it: same component, "
                               "other sign\n    u[:, 1] = -u[:, 1]\n")


def write_demo_project(folder: Path, with_environment: bool = False) -> None:
    """The demo project's files: data, analysis scripts, holotype.toml (with the demo environment and the
    analysis using its invented libraries when `with_environment`)."""
    (folder / "analysis").mkdir(parents=True, exist_ok=True)
    write_atomic(folder / "data" / "lakes.csv", survey_csv())
    for name in (*SCRIPTS, *(("clarity",) if with_environment else ())):
        text = resources.files("holotype.demo.scripts").joinpath(f"{name}.py").read_text(encoding="utf-8")
        write_atomic(folder / "analysis" / f"{name}.py", text)
    python = '# the demo\'s own environment (holotype demo made it)\npython = ".venv/bin/python"\n'
    write_atomic(folder / "holotype.toml", CONFIG.replace("@PYTHON@", python if with_environment else "")
                 + (CLARITY if with_environment else ""))
    write_atomic(folder / "README.txt", "An invented freshwater lake survey (all values made up) set up as a "
                                        "holotype project.\nTry: holotype check, holotype replay, holotype report\n")


class Tour:
    """Narrates each step; every figure shown comes from holotype's own findings."""

    def __init__(self, folder: Path, console: Console, python: str | None = None) -> None:
        self.folder = folder
        self.console = console
        self.python = python or sys.executable
        self.with_environment = python is None and can_build()

    def step(self, number: int, title: str, words: str) -> None:
        self.console.print()
        self.console.print(Rule(Text(f"{number}. {title}", style="bold"), align="left"))
        self.console.print(words, highlight=False)

    def show(self, report: Judgement, *, show_info: bool = False) -> None:
        self.console.print(FindingsTable(report, show_info=show_info))

    def expect(self, report: Judgement, ok: bool, what: str) -> None:
        if report.ok != ok:
            raise HolotypeError(f"the demo expected {what}, but holotype found otherwise; see the table above")

    def run(self) -> None:
        started = time.monotonic()
        folder = self.folder
        self.step(1, "Write the project",
                  f"An invented survey of six lakes (three clear-water, three turbid), 30 sites each, with "
                  f"depth, temperature, oxygen, pH, conductivity, chlorophyll-a, turbidity and phosphorus.\n"
                  f"Analyses: summary statistics (CSV), group tests on chlorophyll-a (JSON), a PCA (CSV and "
                  f".npy){CLARITY_WORDS if self.with_environment else ''}. Folder: {folder}")
        write_demo_project(folder, self.with_environment)
        if self.with_environment:
            self.console.print("The analyses run in the demo's own environment, .venv: it sees holotype's packages "
                               "and holds the invented libraries lake-optics, lake-units and lake-tables 1.0.",
                               highlight=False)
            self.python = build_demo_environment(folder)

        self.step(2, "Record", "holotype record: interpreter, platform, packages, data and code digests, the "
                               "project seed; then it runs each analysis with its own seed and stores the "
                               "outputs as baselines in .holotype/baselines.")
        recorded = record_project(folder, python=self.python)
        self.show(recorded, show_info=True)
        self.expect(recorded, True, "a clean record")

        self.step(3, "Check and replay, clean", "check compares the project with holotype.lock, running nothing; "
                                               "replay runs every analysis again and compares each output value "
                                               "by value with its baseline.")
        self.show(check_project(folder, python=self.python))
        report = replay_project(folder, python=self.python)
        self.show(report, show_info=True)
        self.expect(report, True, "a clean replay")

        data = folder / "data" / "lakes.csv"
        original = data.read_bytes()
        self.step(4, "Event: a data cell edited by hand",
                  "Someone 'fixes' one chlorophyll reading in the survey file and tells no one. check names the "
                  "file and its sizes before and after.")
        lines = original.decode().splitlines(keepends=True)
        cells = lines[17].split(",")
        cells[8] = f"{float(cells[8]) + 10:.2f}"
        lines[17] = ",".join(cells)
        write_atomic(data, "".join(lines))
        report = check_project(folder, python=self.python)
        self.show(report)
        self.expect(report, False, "check to catch the edited cell")
        write_atomic(data, original)
        self.console.print("Restored the original file.", style="dim")

        pca = folder / "analysis" / "pca.py"
        pca_text = pca.read_text()
        config = folder / "holotype.toml"
        config_text = config.read_text()
        self.step(5, "Event: a principal component changes sign after a library update",
                  "Eigenvectors are defined only up to sign, and another linear-algebra build may return PC2 "
                  "as -PC2. The project's sign_free rules let a whole column flip (never single values):")
        pca.write_text(pca_text.replace(SIGN_FLIP, SIGN_FLIP_AFTER))
        report = replay_project(folder, ["pca"], python=self.python)
        self.show(report, show_info=True)
        self.expect(report, True, "the sign-free rule to allow the flipped column")
        self.console.print("Without the sign_free rules the same run fails:", highlight=False)
        config.write_text(config_text.replace("sign_free = true", "sign_free = false"))
        report = replay_project(folder, ["pca"], python=self.python)
        self.show(report)
        self.expect(report, False, "the flip to fail without sign_free")
        config.write_text(config_text)
        pca.write_text(pca_text)
        self.console.print("Restored the script and the rules.", style="dim")

        self.step(6, "Event: someone changes the project seed",
                  "The permutation p-value is a Monte Carlo estimate: with another seed it moves, and at the "
                  "project's tight tolerance replay says exactly where and by how much.")
        config.write_text(config_text.replace(f"seed = {PROJECT_SEED}", f"seed = {PROJECT_SEED + 1}"))
        report = replay_project(folder, ["tests"], python=self.python)
        self.show(report)
        self.expect(report, False, "the moved p-value to fail")
        recorded = json.loads(_baseline_of(folder, "results/tests.json"))["permutation"]["p_value"]
        mc_se = math.sqrt(recorded * (1 - recorded) / 10_000)
        self.console.print(f"The recorded permutation p-value is {recorded:.5f}; its Monte Carlo standard error "
                           f"with 10,000 permutations is about {mc_se:.5f}. Keep the seed fixed, or set a "
                           "tolerance rule for that one value if you mean to compare across seeds.",
                           highlight=False)
        config.write_text(config_text)
        replay_project(folder, ["tests"], python=self.python)  # put the tests' outputs back as recorded
        self.console.print("Restored the seed.", style="dim")

        if self.with_environment:
            self.upgrade_event()
        self.step(8 if self.with_environment else 7, "Back to clean", "The project is as recorded again:")
        final_check = check_project(folder, python=self.python)
        final_replay = replay_project(folder, python=self.python)
        self.show(final_check)
        self.show(final_replay)
        self.expect(final_check, True, "a clean final check")
        self.expect(final_replay, True, "a clean final replay")
        self.console.print()
        self.console.print(f"Done in {time.monotonic() - started:.0f}s. Try next, in {folder}:", style="bold")
        for cmd in ("holotype check --format json", "holotype replay --twice", "holotype report --format html "
                    "--output methods.html", "holotype compare results/summary.csv results/summary.csv --rtol 1e-6"):
            self.console.print(f"  {cmd}", highlight=False)
        self.console.print("A reproduced number is not a verified one: holotype shows that results did not "
                           "drift, not that the analysis is sound.", style="dim")


    def upgrade_event(self) -> None:
        folder = self.folder
        self.step(7, "Event: three libraries upgraded, one of them moves a number",
                  "All three invented lake libraries are upgraded to 2.0. replay fails on the clarity table; "
                  "pinpoint then builds candidate environments (the recorded versions, each installed once, put "
                  "ahead on the import path) and finds which upgrade moved it.")
        install_libraries(folder, self.python, "2.0")
        report = replay_project(folder, ["clarity"], python=self.python)
        self.show(report)
        self.expect(report, False, "the upgrade to move the clarity table")
        found = pinpoint_project(folder, installer=InstallerOptions([str(wheel_folder(folder))], None, True),
                                 say=lambda line: self.console.print(line, style="dim", highlight=False))
        self.show(found)
        causes = [f for f in found.findings if f.kind == "pinpoint.cause"]
        if [f.subject for f in causes] != ["lake-optics"]:
            raise HolotypeError("the demo expected pinpoint to name lake-optics; see the table above")
        self.console.print("A named cause is the change that moved the number, not a verdict on which number is "
                           "right: whether 2.0's coefficient is the better one is for the analyst to judge.",
                           highlight=False)
        install_libraries(folder, self.python, "1.0")
        replay_project(folder, ["clarity"], python=self.python)  # put the clarity table back as recorded
        self.console.print("Put the libraries back at 1.0.", style="dim")


def _baseline_of(folder: Path, output: str) -> bytes:
    from holotype.lockfile import LOCK_NAME, read_lock
    from holotype.store import BaselineStore

    lock = read_lock(folder / LOCK_NAME)
    for rec in lock.analyses.values():
        if output in rec.outputs:
            return BaselineStore(folder).get(rec.outputs[output].sha256, rec.outputs[output].size)
    raise HolotypeError(f"no baseline for {output}")


def run_demo(folder: Path, console: Console) -> None:
    """Create `folder` (new or empty) and run the tour in it."""
    folder = Path(folder)
    if folder.exists() and (not folder.is_dir() or any(folder.iterdir())):
        raise HolotypeError("not empty; holotype demo writes only into a new or empty folder", folder)
    folder.mkdir(parents=True, exist_ok=True)
    Tour(folder.resolve(), console).run()
