"""Which packages the analysis uses: imports from .py files and notebook cells, declared dependencies,
and the Requires-Dist closure with markers evaluated for the target (PEP 508)."""

from __future__ import annotations

import json
from pathlib import Path

from conftest import write
from holotype.capture.imports import scan_imports
from holotype.capture.usage import declared_requirements, used_closure
from holotype.records import Environment, Interpreter, PackageRecord, PlatformInfo

MARKERS = {"implementation_name": "cpython", "implementation_version": "3.11.7", "os_name": "posix",
           "platform_machine": "x86_64", "platform_release": "6.1", "platform_system": "Linux",
           "platform_version": "#1", "python_full_version": "3.11.7", "platform_python_implementation": "CPython",
           "python_version": "3.11", "sys_platform": "linux"}


def env(*packages: PackageRecord) -> Environment:
    return Environment(Interpreter("cpython", "3.11.7"), PlatformInfo("Linux", "6.1", "x86_64"),
                       {p.name: p for p in packages}, frozenset({"os", "json", "csv"}), MARKERS)


def test_notebook_cells_with_magics_and_broken_files(tmp_path: Path) -> None:
    nb = {"cells": [
        {"cell_type": "markdown", "source": ["import notme\n"]},
        {"cell_type": "code", "source": ["%matplotlib inline\n", "import lakes_stats as ls\n", "!pip list\n",
                                         "from scipy import stats\n", "ls?\n"]},
        {"cell_type": "code", "source": "%%bash\necho not python\n"},
        {"cell_type": "code", "source": "def broken(:\n"},
    ], "nbformat": 4}
    write(tmp_path / "survey.ipynb", json.dumps(nb))
    write(tmp_path / "fit.py", "import numpy as np\nfrom .local import x\nimport os.path\n")
    write(tmp_path / "bad.py", "import pandas\nprint('unterminated\n")
    scan = scan_imports([(p.name, p) for p in sorted(tmp_path.iterdir())])
    assert {"lakes_stats", "scipy", "numpy", "os"} <= scan.modules
    assert "notme" not in scan.modules and "local" not in scan.modules
    problems = dict(scan.problems)
    assert "syntax error at line 2" in problems["bad.py"]
    assert "code cell 3, line 1" in problems["survey.ipynb"]


def test_closure_follows_requirements_with_markers_and_extras() -> None:
    environment = env(
        PackageRecord("lake-stats", "1.0", requires=("numpy>=1.24", "colorama; sys_platform == 'win32'",
                                                     "plotting-lib; extra == 'plots'"), top_level=("lake_stats",)),
        PackageRecord("numpy", "2.4.6", top_level=("numpy",)),
        PackageRecord("colorama", "0.4.6", top_level=("colorama",)),
        PackageRecord("plotting-lib", "3.0", requires=("pillow",), top_level=("plotting_lib",)),
        PackageRecord("pillow", "11.0", top_level=("PIL",)),
        PackageRecord("linter", "1.0", top_level=("linter",)),
    )
    assert used_closure(environment, {"lake_stats", "os"}, []) == {"lake-stats", "numpy"}
    # an extra asked for in a declared requirement pulls in its packages (PEP 508 extras)
    assert used_closure(environment, set(), ["lake-stats[plots]"]) == {"lake-stats", "numpy", "plotting-lib",
                                                                       "pillow"}
    # a declared requirement whose marker is false for the target is not used
    assert used_closure(environment, set(), ["linter; python_version < '3.0'"]) == set()


def test_declared_dependencies_from_pyproject(tmp_path: Path) -> None:
    write(tmp_path / "pyproject.toml", '[project]\nname = "thesis"\ndependencies = ["numpy>=2", "scipy"]\n')
    assert declared_requirements(tmp_path) == ["numpy>=2", "scipy"]
    write(tmp_path / "pyproject.toml", "[project\n")
    assert declared_requirements(tmp_path) == []


def test_fixture_notebook_project_records_and_reports_the_broken_script(tmp_path: Path) -> None:
    import shutil

    from conftest import FIXTURES, run_cli

    root = tmp_path / "plankton"
    shutil.copytree(FIXTURES / "notebook-project", root)
    from holotype.capture.walk import ProjectWalker

    code = ProjectWalker(root).code_files({})
    assert sorted(code) == ["analysis/draft.py", "analysis/explore.ipynb", "analysis/ratios.py"]
    scan = scan_imports([(rel, Path(f.path)) for rel, f in code.items()])
    assert {"csv", "numpy", "packaging", "collections"} <= scan.modules
    assert "this_is_timed_not_parsed" not in scan.modules  # a %%time cell is not parsed
    assert run_cli("record", "--no-run", "-C", root).code == 0
    doc = json.loads(run_cli("check", "-C", root, "--format", "json").out)
    [note] = [f for f in doc["findings"] if f["kind"] == "code.unparsable"]
    assert note["subject"] == "analysis/draft.py" and note["severity"] == "info"
    lock = (root / "holotype.lock").read_text()
    assert "[packages.numpy]\nversion" in lock and "used = true" in lock.split("[packages.numpy]")[1][:80]
