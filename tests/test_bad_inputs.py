"""The hostile-input corpus in tests/bad_inputs/: every case gives its exit code and one clear line, never a traceback."""

from __future__ import annotations

import json
import shutil
import sys
import tomllib
from pathlib import Path

import pytest

from conftest import run_cli, write
from holotype.lockfile import read_lock
from holotype.store import BaselineStore

CORPUS = Path(__file__).resolve().parent / "bad_inputs"
EXPECTED = tomllib.loads((CORPUS / "expected.toml").read_text(encoding="utf-8"))


def cases(folder: str) -> list[str]:
    return sorted(EXPECTED[folder])


def assert_one_clear_line(err: str, names: str, phrase: str) -> None:
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err
    assert names in lines[0], lines[0]
    assert phrase in lines[0], lines[0]


def test_corpus_is_large_enough() -> None:
    hostile = sum(1 for entries in EXPECTED.values() for name in entries if not name.startswith("good."))
    assert hostile >= 60
    for folder, entries in EXPECTED.items():
        for name in entries:
            assert (CORPUS / folder / name).exists(), f"{folder}/{name} listed but missing"


@pytest.mark.parametrize("name", cases("config"))
def test_config_corpus(tmp_path: Path, name: str) -> None:
    want = EXPECTED["config"][name]
    write(tmp_path / "data" / "survey.csv", "x\n1\n")
    shutil.copy(CORPUS / "config" / name, tmp_path / "holotype.toml")
    command = want.get("command", "record")
    args = [command, "-C", tmp_path] + (["--no-run"] if command == "record" else [])
    if command == "replay":
        (tmp_path / "holotype.lock").write_text("")  # the config is judged before the lock is read
    result = run_cli(*args)
    assert result.code == want["code"], result.err + result.out
    if want["code"] == 2:
        assert_one_clear_line(result.err, "holotype.toml", want["message"])
    else:
        assert want["message"] in result.err and "Traceback" not in result.err


@pytest.mark.parametrize("name", cases("lockfile"))
def test_lockfile_corpus(tmp_path: Path, name: str) -> None:
    want = EXPECTED["lockfile"][name]
    write(tmp_path / "holotype.toml", "seed = 1\n")
    shutil.copy(CORPUS / "lockfile" / name, tmp_path / "holotype.lock")
    result = run_cli("check", "-C", tmp_path)
    assert result.code == 2, result.out
    assert_one_clear_line(result.err, "holotype.lock", want["message"])


@pytest.mark.parametrize("name", [n for n in cases("compare") if not n.startswith("good.")])
def test_compare_corpus(name: str) -> None:
    want = EXPECTED["compare"][name]
    suffix = Path(name).suffix
    good = CORPUS / "compare" / f"good{suffix}"
    result = run_cli("compare", good, CORPUS / "compare" / name, "--format", "json")
    allowed = want.get("code_in", [want["code"]])
    assert result.code in allowed, result.err + result.out
    if result.code == 2:
        assert_one_clear_line(result.err, name, want["message"])
    else:
        doc = json.loads(result.out)
        assert doc["ok"] is (result.code == 0)
        assert want["message"] in json.dumps(doc)


@pytest.fixture(scope="module")
def recorded(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("baseline-corpus")
    write(root / "stats.py", "import os\nos.makedirs('results', exist_ok=True)\n"
                             "open('results/s.csv', 'w').write('stat,value\\nmean,1.0\\n')\n")
    write(root / "holotype.toml", f'python = "{sys.executable}"\nseed = 2\n\n[analyses.s]\ncommand = "python stats.py"\n'
                                  'outputs = ["results/s.csv"]\n')
    assert run_cli("record", "-C", root).code == 0
    return root


@pytest.mark.parametrize("name", cases("baselines"))
def test_baseline_corpus(recorded: Path, name: str) -> None:
    want = EXPECTED["baselines"][name]
    digest = read_lock(recorded / "holotype.lock").analyses["s"].outputs["results/s.csv"].sha256
    target = BaselineStore(recorded).path_for(digest)
    original = target.read_bytes()
    try:
        target.write_bytes((CORPUS / "baselines" / name).read_bytes())
        result = run_cli("replay", "-C", recorded, "--format", "json")
    finally:
        target.write_bytes(original)
    assert result.code == want["code"]
    [bad] = [f for f in json.loads(result.out)["findings"] if f["kind"] == "output.baseline"]
    assert bad["severity"] == "fail" and want["message"] in bad["message"]


def test_symlink_out_of_the_project_and_nul_in_cli_paths(tmp_path: Path) -> None:
    outside = write(tmp_path / "secret" / "s.csv", "x\n")
    project = tmp_path / "p"
    write(project / "holotype.toml", 'data = ["data"]\nseed = 1\n')
    (project / "data").mkdir()
    (project / "data" / "link.csv").symlink_to(outside)
    result = run_cli("record", "--no-run", "-C", project)
    assert result.code == 2
    assert_one_clear_line(result.err, "data/link.csv", "outside the project")
    nul = run_cli("compare", "a\x00b.csv", "c.csv")
    assert nul.code == 2 and "Traceback" not in nul.err
