"""CI gate and sharing: JUnit and Markdown, lockfile diff, pins, recreate and the provenance report."""

from __future__ import annotations

import json
import os
import subprocess
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import pytest

from conftest import make_venv, run_cli, write
from holotype.findings import Finding, Judgement
from holotype.lockfile import dump_lock, read_lock
from holotype.render.junit import render_junit
from holotype.render.markdown import render_markdown

# ----------------------------------------------------------------------------- JUnit and Markdown


def test_junit_failures_equal_json_fail_findings(survey: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    (survey / "data" / "a.csv").write_text("x\n1\n3\n")
    write(survey / "data" / "new.csv", "y\n")
    monkeypatch.setenv("SHIFT", "0.01")
    doc = json.loads(run_cli("replay", "-C", survey, "--format", "json").out)
    xml_text = run_cli("replay", "-C", survey, "--format", "junit").out
    root = ET.fromstring(xml_text)  # parsed with the standard library's XML reader
    fails = sum(1 for f in doc["findings"] if f["severity"] == "fail")
    assert fails >= 1
    assert int(root.get("failures")) == fails == len(root.findall(".//failure"))
    check_doc = json.loads(run_cli("check", "-C", survey, "--format", "json").out)
    check_xml = ET.fromstring(run_cli("check", "-C", survey, "--format", "junit").out)
    assert int(check_xml.get("failures")) == sum(f["severity"] == "fail" for f in check_doc["findings"])
    assert {s.get("name") for s in check_xml.findall("testsuite")} >= {"data", "holotype"}


def test_junit_and_markdown_escape_user_strings() -> None:
    nasty = 'a|b <script>"&\'\nnext'
    report = Judgement("check", (Finding("data", nasty, "data.changed", nasty, severity="fail"),))
    root = ET.fromstring(render_junit(report))
    assert root.find(".//testcase[@name]").get("name") == nasty  # type: ignore[union-attr]
    md = render_markdown(report)
    row = [line for line in md.splitlines() if line.startswith("| ❌")][0]
    assert "a\\|b" in row and "<br>" in row and row.count(" | ") == 3


def test_output_file_is_written_while_the_terminal_gets_the_table(survey: Path, tmp_path: Path) -> None:
    target = tmp_path / "findings.xml"
    result = run_cli("check", "-C", survey, "--format", "junit", "--output", target)
    assert result.code == 0 and "ok · 0 fail" in result.out and "<testsuites" not in result.out
    assert ET.parse(target).getroot().tag == "testsuites"


# ----------------------------------------------------------------------------- diff


def test_diff_reports_every_kind_of_change(survey: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from dataclasses import replace

    from holotype.records import Interpreter, Origin, PackageRecord

    a = read_lock(survey / "holotype.lock")
    b = read_lock(survey / "holotype.lock")
    some = sorted(n for n, p in a.packages.items() if p.origin.kind == "index")[:4]
    a.packages["zz-old"] = PackageRecord("zz-old", "1.0", used=True)
    b.packages["zz-new"] = PackageRecord("zz-new", "2.0")
    b.packages[some[0]] = replace(b.packages[some[0]], version="999.0")
    b.packages[some[1]] = replace(b.packages[some[1]], version="0.0.1")
    b.packages[some[2]] = replace(b.packages[some[2]], origin=Origin("vcs", url="https://example.org/r.git", vcs="git",
                                                                      commit="1" * 40))
    b.interpreter = Interpreter(a.interpreter.implementation, "3.99.0", a.interpreter.compiler, a.interpreter.abi)
    b.project_seed = 10
    b.data = {k: replace(v, sha256="0" * 64) for k, v in b.data.items()}
    out = next(iter(b.analyses["mean"].outputs))
    b.analyses["mean"].outputs[out] = replace(b.analyses["mean"].outputs[out], sha256="1" * 64)
    (tmp_path / "A.lock").write_text(dump_lock(a))
    (tmp_path / "B.lock").write_text(dump_lock(b))
    result = run_cli("diff", tmp_path / "A.lock", tmp_path / "B.lock", "--format", "json")
    assert result.code == 1
    messages = {(f["area"], f["subject"]): f["message"] for f in json.loads(result.out)["findings"]}
    assert "not in B.lock" in messages[("package", "zz-old")]
    assert "in B.lock, not in A.lock" in messages[("package", "zz-new")]
    assert "(upgraded)" in messages[("package", some[0])] and "(downgraded)" in messages[("package", some[1])]
    assert "origin index in A.lock" in messages[("package", some[2])]
    assert "3.99.0" in messages[("interpreter", "version")]
    assert ("seed", "project") in messages and ("data", "data/a.csv") in messages
    assert "baseline changed" in messages[("output", out)]


def test_diff_rev_in_a_git_repository(survey: Path) -> None:
    def git(*args: str) -> None:
        subprocess.run(["git", *args], cwd=survey, check=True, capture_output=True,
                       env={**os.environ, "GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.org",
                            "GIT_COMMITTER_NAME": "t", "GIT_COMMITTER_EMAIL": "t@example.org"})

    outside = run_cli("diff", "--rev", "HEAD", "-C", survey)
    assert outside.code == 2 and "not inside a git repository" in outside.err
    git("init", "-q")
    git("add", "holotype.lock")
    git("commit", "-qm", "record")
    assert run_cli("diff", "--rev", "HEAD", "-C", survey).code == 0
    (survey / "data" / "a.csv").write_text("x\n5\n")
    assert run_cli("record", "--no-run", "-C", survey).code == 0
    result = run_cli("diff", "--rev", "HEAD", "-C", survey, "--format", "json")
    assert result.code == 1 and any(f["subject"] == "data/a.csv" for f in json.loads(result.out)["findings"])
    bad = run_cli("diff", "--rev", "nosuchrev", "-C", survey)
    assert bad.code == 2 and "nosuchrev" in bad.err


# ----------------------------------------------------------------------------- pins and recreate


@pytest.fixture
def venv_project(tmp_path: Path, wheelhouse: Path) -> tuple[Path, Path]:
    root = tmp_path / "colleague"
    venv = make_venv(root / ".venv", wheelhouse)
    venv.install("alpha==1.0", "beta==1.0", "gamma==1.0")
    write(root / "fit.py", "import alpha\n")
    write(root / "holotype.toml", 'python = ".venv/bin/python"\nseed = 3\n')
    assert run_cli("record", "--no-run", "-C", root).code == 0
    return root, wheelhouse


def test_pins_requirements_parse_back_with_packaging(venv_project: tuple[Path, Path]) -> None:
    from packaging.requirements import Requirement

    root, _ = venv_project
    text = run_cli("pins", "--to", "requirements", "-C", root).out
    pins = {}
    for line in text.splitlines():
        if line and not line.startswith("#"):
            req = Requirement(line)  # PEP 508 parser from packaging
            [spec] = list(req.specifier)
            pins[req.name] = (spec.operator, spec.version)
    assert pins["alpha"] == ("==", "1.0") and pins["beta"] == ("==", "1.0") and pins["gamma"] == ("==", "1.0")


def test_pins_pylock_is_accepted_by_the_pep751_reader(venv_project: tuple[Path, Path], tmp_path: Path) -> None:
    import tomllib

    from packaging.pylock import Pylock

    root, wheels = venv_project
    missing = run_cli("pins", "--to", "pylock", "-C", root)
    assert missing.code == 2 and "--find-links" in missing.err
    # a wheelhouse holding every locked file: ours plus pip's and setuptools' own wheels from ensurepip
    import ensurepip

    bundled = Path(ensurepip.__file__).parent / "_bundled"
    target = tmp_path / "pylock.toml"
    result = run_cli("pins", "--to", "pylock", "-C", root, "--find-links", wheels, "--find-links", bundled,
                     "--output", target)
    assert result.code == 0, result.err
    lock = Pylock.from_dict(tomllib.loads(target.read_text()))  # PEP 751's reference reader
    names = {p.name for p in lock.packages}
    assert {"alpha", "beta", "gamma"} <= names


@pytest.mark.slow
def test_recreate_offline_then_checks_clean(venv_project: tuple[Path, Path], tmp_path: Path) -> None:
    root, wheels = venv_project
    target = tmp_path / "rebuilt"
    result = run_cli("recreate", target, "-C", root, "--find-links", wheels, "--no-index", "--format", "json")
    assert result.code == 0, result.out + result.err
    doc = json.loads(result.out)
    assert doc["ok"] and not [f for f in doc["findings"] if f["area"] == "package"]
    out = subprocess.run([str(target / "bin" / "python"), "-c", "import alpha, beta; print(alpha.VERSION)"],
                         capture_output=True, text=True)
    assert out.stdout.strip() == "1.0"
    again = run_cli("recreate", target, "-C", root)
    assert again.code == 2 and "new or empty" in again.err


def test_recreate_refuses_when_no_interpreter_matches(venv_project: tuple[Path, Path], tmp_path: Path) -> None:
    root, _ = venv_project
    text = (root / "holotype.lock").read_text()
    version = read_lock(root / "holotype.lock").interpreter.version
    (root / "holotype.lock").write_text(text.replace(f'version = "{version}"', 'version = "3.7.99"', 1))
    result = run_cli("recreate", tmp_path / "x", "-C", root)
    assert result.code == 2 and "no Python 3.7.99 found" in result.err


# ----------------------------------------------------------------------------- report


class _Collect(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def test_report_html_has_svg_and_package_table(survey: Path, tmp_path: Path) -> None:
    assert run_cli("replay", "-C", survey).code == 0
    target = tmp_path / "methods.html"
    assert run_cli("report", "--format", "html", "--output", target, "-C", survey).code == 0
    parser = _Collect()
    parser.feed(target.read_text())
    text = " ".join(parser.text)
    assert "svg" in parser.tags and "table" in parser.tags
    assert "package" in text and "version" in text and "out/r.json" in text
    assert "all outputs reproduced within tolerance" in text
    assert "not a correct number" in text and str(Path.home()) not in target.read_text()


def test_report_markdown_names_data_seeds_and_caution(survey: Path) -> None:
    text = run_cli("report", "-C", survey).out
    assert "`data/a.csv`" in text and "Project seed: 9" in text and "not a correct number" in text
    assert "ethics approvals" in text


def test_locks_written_by_format_1_stay_readable(tmp_path: Path) -> None:
    # fixtures/locks/format1.lock is what holotype 0.1.0 writes; diff and report must keep reading it
    import shutil

    from conftest import FIXTURES

    old = FIXTURES / "locks" / "format1.lock"
    lock = read_lock(old)
    assert lock.packages["lake-tools"].origin.commit == "3f1c2a9b8d7e6f5a4b3c2d1e0f9a8b7c6d5e4f3a"
    assert lock.history[0].reason == "recounted pond 2 visit 1"
    newer = tmp_path / "newer.lock"
    lock.packages["numpy"] = lock.packages["numpy"].__class__("numpy", "2.0.0", used=True)
    newer.write_text(dump_lock(lock))
    result = run_cli("diff", old, newer, "--format", "json")
    assert result.code == 1 and "(upgraded)" in result.out
    project = tmp_path / "p"
    project.mkdir()
    shutil.copy(old, project / "holotype.lock")
    text = run_cli("report", "-C", project).out
    assert "lake-tools" in text and "Project seed: 7310" in text and "black-ish-formatter" not in text
