"""End to end through the CLI, against a real second virtual environment built offline in the test."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from conftest import make_venv, run_cli, write


@pytest.fixture
def project(tmp_path: Path, wheelhouse: Path) -> tuple[Path, object]:
    root = tmp_path / "thesis"
    venv = make_venv(root / ".venv", wheelhouse)
    venv.install("alpha==1.0", "beta==1.0", "gamma==1.0")
    write(root / "analysis" / "fit.py", "import alpha\nimport json\nprint(alpha.VERSION)\n")
    write(root / "data" / "obs.csv", "x,y\n1,2\n")
    assert run_cli("start", "-C", root).code == 0
    return root, venv


def _json(result: object) -> dict:
    return json.loads(result.out)  # type: ignore[attr-defined]


def record_then_install(project: tuple[Path, object], spec: str) -> Path:
    """Record the project, then change one package in its environment."""
    root, venv = project
    assert run_cli("record", "--no-run", "-C", root).code == 0
    venv.install(spec)  # type: ignore[attr-defined]
    return root


def test_record_then_check_clean(project: tuple[Path, object]) -> None:
    root, _ = project
    assert 'python = ".venv/bin/python"' in (root / "holotype.toml").read_text()
    rec = run_cli("record", "--no-run", "-C", root)
    assert rec.code == 0, rec.err
    lock = (root / "holotype.lock").read_text()
    assert "[packages.alpha]" in lock and "[packages.gamma]" in lock
    doc = _json(run_cli("check", "-C", root, "--format", "json"))
    assert doc["ok"] is True and doc["command"] == "check"
    assert [f for f in doc["findings"] if f["severity"] != "info"] == []


def test_used_package_drift_fails_with_expected_and_actual(project: tuple[Path, object]) -> None:
    root = record_then_install(project, "alpha==1.1")
    result = run_cli("check", "-C", root, "--format", "json")
    assert result.code == 1
    doc = _json(result)
    [alpha] = [f for f in doc["findings"] if f["subject"] == "alpha"]
    assert alpha == {**alpha, "area": "package", "severity": "fail", "expected": "1.0", "actual": "1.1"}
    assert "upgraded" in alpha["message"]
    assert doc["ok"] is False


def test_requirement_of_a_used_package_is_used(project: tuple[Path, object]) -> None:
    root = record_then_install(project, "beta==2.0")
    doc = _json(run_cli("check", "-C", root, "--format", "json"))
    [beta] = [f for f in doc["findings"] if f["subject"] == "beta"]
    assert beta["severity"] == "fail" and "downgraded" not in beta["message"]


def test_unrelated_package_drift_warns_and_strict_fails(project: tuple[Path, object]) -> None:
    root = record_then_install(project, "gamma==2.0")
    result = run_cli("check", "-C", root, "--format", "json")
    assert result.code == 0
    [gamma] = [f for f in _json(result)["findings"] if f["subject"] == "gamma"]
    assert gamma["severity"] == "warn"
    strict = run_cli("check", "-C", root, "--strict", "--format", "json")
    assert strict.code == 1
    assert [f["severity"] for f in _json(strict)["findings"] if f["subject"] == "gamma"] == ["fail"]


def test_policy_table_can_make_unrelated_drift_fail(project: tuple[Path, object]) -> None:
    root, venv = project
    with (root / "holotype.toml").open("a") as fh:
        fh.write('\n[policy]\n"package.unrelated" = "fail"\n')
    assert run_cli("record", "--no-run", "-C", root).code == 0
    venv.install("gamma==2.0")  # type: ignore[attr-defined]
    assert run_cli("check", "-C", root).code == 1


def test_origin_change_is_reported(project: tuple[Path, object], wheelhouse: Path) -> None:
    root, venv = project
    assert run_cli("record", "--no-run", "-C", root).code == 0
    venv.pip("install", "--force-reinstall", "--no-deps", str(wheelhouse / "alpha-1.0-py3-none-any.whl"))  # type: ignore[attr-defined]
    doc = _json(run_cli("check", "-C", root, "--format", "json"))
    [alpha] = [f for f in doc["findings"] if f["subject"] == "alpha"]
    assert alpha["severity"] == "fail" and "origin" in alpha["message"] and alpha["expected"] == "index"


def test_missing_interpreter_is_exit_2_with_the_path(project: tuple[Path, object]) -> None:
    root, _ = project
    shutil.rmtree(root / ".venv")
    result = run_cli("record", "--no-run", "-C", root, "--python", str(root / "nope" / "python"))
    assert result.code == 2
    assert "nope/python" in result.err and "--python" in result.err
    assert "Traceback" not in result.err and len(result.err.strip().splitlines()) == 1


def test_project_moved_to_another_folder_checks_clean(project: tuple[Path, object], tmp_path: Path) -> None:
    root, _ = project
    assert run_cli("record", "--no-run", "-C", root).code == 0
    moved = tmp_path / "elsewhere" / "thesis"
    moved.parent.mkdir()
    shutil.move(str(root), moved)
    # the venv's scripts hold absolute paths; the interpreter itself still runs from its new place
    result = run_cli("check", "-C", moved, "--format", "json")
    data = [f for f in _json(result)["findings"] if f["area"] in ("data", "code")]
    assert data == []


def test_package_the_code_starts_importing_counts_as_used(project: tuple[Path, object]) -> None:
    root, venv = project
    assert run_cli("record", "--no-run", "-C", root).code == 0
    write(root / "analysis" / "plot.py", "import gamma\n")  # gamma was unrelated tooling at record time
    venv.install("gamma==2.0")  # type: ignore[attr-defined]
    doc = _json(run_cli("check", "-C", root, "--format", "json"))
    [gamma] = [f for f in doc["findings"] if f["subject"] == "gamma"]
    assert gamma["severity"] == "fail" and "not used" not in gamma["message"]
