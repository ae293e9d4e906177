"""The stamp workers a check starts ahead, from the note the previous check left: used only when exact."""

from __future__ import annotations

import json
import os
import subprocess
from pathlib import Path
from typing import Any

import pytest

from conftest import run_cli, write
from holotype.capture import folder_stamps, head_start
from holotype.manifests import FOLDER_THRESHOLD
from test_scale import fill, findings, settle


@pytest.fixture
def project(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setattr(folder_stamps, "WORKER_FILES", 0)  # small folders go to workers too
    root = tmp_path / "proj"
    write(root / "holotype.toml", 'data = ["data"]\ncode = []\nseed = 1\n')
    for name in ("east", "west"):
        fill(root / "data" / name, FOLDER_THRESHOLD)
    assert run_cli("record", "--no-run", "-C", root).code == 0
    settle()
    assert findings(root) == (0, [])  # remembers the folders' stamps
    assert findings(root) == (0, [])  # sets aside the folders, and leaves the note
    return root


@pytest.fixture
def taken(monkeypatch: pytest.MonkeyPatch) -> list[bool]:
    """For each check: whether it adopted workers started ahead."""
    got: list[bool] = []
    real = head_start.take

    def spy(root: str, requests: list[dict[str, Any]]) -> list[subprocess.Popen[bytes]] | None:
        procs = real(root, requests)
        got.append(procs is not None)
        return procs

    monkeypatch.setattr(head_start, "take", spy)
    return got


def ahead_for(root: Path) -> bool:
    return os.path.realpath(root) in head_start._started


def note_of(root: Path) -> Path:
    return head_start._note_path(os.path.realpath(root))


def test_the_next_check_adopts_the_workers_started_ahead_and_sees_a_change(project: Path, taken: list[bool]) -> None:
    assert note_of(project).is_file()
    assert findings(project) == (0, []) and taken == [True]
    (project / "data" / "east" / "well00007.dat").write_bytes(b"changed after the note\n")
    code, found = findings(project)
    assert taken == [True, True]  # the same request: the workers' stamp shows the change, and the file is named
    assert code == 1 and [f["subject"] for f in found] == ["data/east/well00007.dat"]
    assert not head_start._started  # nothing is left running after a check


def test_a_changed_configuration_starts_nothing_ahead(project: Path, taken: list[bool]) -> None:
    write(project / "holotype.toml", 'data = ["data"]\ncode = []\nseed = 1\nexclude = ["*.tmp"]\n')
    head_start.begin(project)
    assert not ahead_for(project)  # the note was left with another configuration: no work is started on it
    assert findings(project) == (0, [])
    assert taken == [False]
    assert findings(project) == (0, []) and taken == [False, True]  # the note was written anew


def test_workers_started_for_other_requests_are_stopped_and_not_used(project: Path, taken: list[bool],
                                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    note = json.loads(note_of(project).read_text())
    for request in note["requests"]:
        request["folders"] = request["folders"][:1] + ["data/elsewhere"]
    note_of(project).write_text(json.dumps(note))
    started: list[subprocess.Popen[bytes]] = []
    real_spawn = head_start.spawn
    monkeypatch.setattr(head_start, "spawn", lambda request: started.append(real_spawn(request)) or started[-1])
    head_start.begin(project)
    ahead = list(started)
    assert ahead and ahead_for(project)
    assert findings(project) == (0, [])
    assert taken == [False] and all(p.poll() is not None for p in ahead)
    assert json.loads(note_of(project).read_text())["requests"] != note["requests"]


@pytest.mark.parametrize("damage", ["garbage", "other root", "outside", "huge"])
def test_a_note_that_is_not_trusted_starts_nothing(project: Path, damage: str,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    path = note_of(project)
    note = json.loads(path.read_text())
    if damage == "garbage":
        path.write_bytes(b"\x00{not json")
    elif damage == "other root":
        note["root"] = note["requests"][0]["root"] = str(project.parent)
        path.write_text(json.dumps(note))
    elif damage == "outside":
        note["requests"][0]["folders"] = ["../../etc"]
        path.write_text(json.dumps(note))
    else:
        path.write_text(json.dumps({**note, "padding": "x" * (head_start.NOTE_LIMIT + 1)}))
    monkeypatch.setattr(head_start, "spawn", lambda request: pytest.fail("a worker was started from the note"))
    head_start.begin(project)
    assert not ahead_for(project)


def test_check_full_and_the_switch_start_nothing_ahead(project: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(head_start, "spawn", lambda request: pytest.fail("a worker was started from the note"))
    assert run_cli("check", "--full", "--quiet", "-C", project).code == 0
    monkeypatch.setenv("HOLOTYPE_NO_HEAD_START", "1")
    head_start.begin(project)
    assert not ahead_for(project)


def test_workers_started_ahead_and_not_taken_are_stopped_when_the_check_ends(
        project: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the check stops before it reaches the folders (an error), so it never asks for the workers
    from holotype.commands import check as check_command
    from holotype.errors import LockfileError

    started: list[subprocess.Popen[bytes]] = []
    real_spawn = head_start.spawn
    monkeypatch.setattr(head_start, "spawn", lambda request: started.append(real_spawn(request)) or started[-1])

    def fails(*args: object, **kwargs: object) -> None:
        raise LockfileError("cannot be judged", project / "holotype.lock")

    monkeypatch.setattr(check_command, "check_project", fails)
    result = run_cli("check", "--quiet", "-C", project)
    assert result.code == 2 and "cannot be judged" in result.err
    assert started and all(p.poll() is not None for p in started)
    assert not head_start._started


def test_the_check_adopts_the_probe_started_ahead(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    root = tmp_path / "small"
    write(root / "holotype.toml", 'data = ["lake.csv"]\ncode = []\nseed = 1\n')
    write(root / "lake.csv", "depth\n1.5\n")
    assert run_cli("record", "--no-run", "--quiet", "-C", root).code == 0
    adopted: list[bool] = []
    real = head_start.probe_for
    monkeypatch.setattr(head_start, "probe_for",
                        lambda *args: (lambda got: adopted.append(got is not None) or got)(real(*args)))
    assert run_cli("check", "--quiet", "-C", root).code == 0
    assert adopted == [True] and not head_start._probes


def test_a_probe_started_for_another_interpreter_is_stopped_not_used(tmp_path: Path,
                                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    import sys

    root = tmp_path / "small"
    write(root / "holotype.toml", 'data = ["lake.csv"]\ncode = []\nseed = 1\n')
    write(root / "lake.csv", "depth\n1.5\n")
    assert run_cli("record", "--no-run", "--quiet", "-C", root).code == 0
    head_start.begin_probe(root, sys.executable)  # chosen by --python: not what the check below resolves
    early = list(head_start._probes.values())
    assert len(early) == 1
    monkeypatch.setattr(head_start, "begin_probe", lambda *args: None)
    assert run_cli("check", "--quiet", "-C", root).code == 0
    assert early[0].proc.poll() is not None and not head_start._probes


def test_a_configuration_that_cannot_be_read_starts_no_probe_and_the_command_says_why(tmp_path: Path) -> None:
    root = tmp_path / "broken"
    write(root / "holotype.toml", 'data = [\n')
    head_start.begin_probe(root)
    assert not head_start._probes
    result = run_cli("check", "-C", root)
    assert result.code == 2 and "holotype.toml" in result.err and "Traceback" not in result.err


def test_check_as_typed_starts_the_noted_workers_before_holotype_loads(project: Path, taken: list[bool],
                                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    # entry.py calls begin_early with the words after `check`, before the command framework is imported
    head_start.begin_early(["--quiet", "-C", str(project)])
    assert ahead_for(project)
    assert findings(project) == (0, []) and taken == [True]
    for args in (["--full", "-C", str(project)], ["-C"], ["--help"], ["--", "-C", str(project)]):
        head_start.begin_early(args)
        assert not ahead_for(project), args  # a whole-hash check takes no stamps; a half-typed line, nothing
    head_start.begin_early([f"--project={project}"])
    assert ahead_for(project)
    head_start.finish()
    monkeypatch.chdir(project / "data" / "east")  # no -C: the nearest folder with a configuration above
    head_start.begin_early(["--strict"])
    assert ahead_for(project)
    head_start.finish()
    assert not head_start._started


def test_a_wrong_guess_of_the_project_costs_nothing_but_work(project: Path, taken: list[bool],
                                                            monkeypatch: pytest.MonkeyPatch) -> None:
    inner = project / "data" / "east" / "inner"
    write(inner / "pyproject.toml", '[project]\nname = "not-a-holotype-project"\n')
    monkeypatch.chdir(inner)
    head_start.begin_early([])  # the nearest configuration-like file is not this project's: nothing noted there
    assert not head_start._started
    (project / "data" / "east" / "well00003.dat").write_bytes(b"changed before the early start\n")
    head_start.begin_early(["-C", str(project)])
    code, found = findings(project)
    assert code == 1 and "data/east/well00003.dat" in [f["subject"] for f in found]
