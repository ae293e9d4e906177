"""The command line's shape: names, shared options, project discovery, one output path, summary lines, the API."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import FIXTURES, run_cli, write

LONG = "a_rather_long_folder_name_for_results_of_the_survey/and_a_subfolder_named_at_length"


def holotype(*args: str | os.PathLike[str], cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    """The installed command in a subprocess, output through pipes (not a terminal)."""
    return subprocess.run([sys.executable, "-m", "holotype", *map(str, args)], cwd=cwd, capture_output=True,
                          text=True, env={**os.environ, "NO_COLOR": "1"})


# ----------------------------------------------------------------------------- names


@pytest.mark.parametrize("retired", ["rerun", "accept", "rebuild", "export"])
def test_retired_command_names_are_gone(retired: str) -> None:
    result = run_cli(retired, "--help")
    assert result.code == 2 and "No such command" in result.err and len(result.err.strip().splitlines()) == 1


def test_retired_analysis_key_is_not_an_alias(tmp_path: Path) -> None:
    write(tmp_path / "holotype.toml", '[analyses.a]\nrun = "python a.py"\noutputs = ["o.csv"]\n')
    result = run_cli("record", "--no-run", "-C", tmp_path)
    assert result.code == 2 and "'analyses.a.command' should be the command to run" in result.err


def test_unknown_analysis_key_gets_a_did_you_mean(tmp_path: Path) -> None:
    from holotype.config import load_config

    write(tmp_path / "holotype.toml", '[analyses.a]\ncommand = "python a.py"\noutputs = ["o.csv"]\noutput = "x"\n'
                                      '[tolerance]\nrtoll = 1e-3\n')
    warnings = load_config(tmp_path).warnings
    assert any("'analyses.a.output'" in w and "did you mean 'outputs'" in w for w in warnings)
    assert any("'tolerance.rtoll'" in w and "did you mean 'rtol'" in w for w in warnings)


# ----------------------------------------------------------------------------- shared options, discovery


def test_project_option_before_and_after_the_command(survey: Path) -> None:
    before = run_cli("-C", survey, "check", "--format", "json")
    after = run_cli("check", "-C", survey, "--format", "json")
    assert before.code == after.code == 0
    assert json.loads(before.out)["command"] == json.loads(after.out)["command"] == "check"
    quiet_first = run_cli("--quiet", "-C", survey, "check")
    assert quiet_first.code == 0 and quiet_first.out == ""


def test_check_from_a_subfolder_finds_the_project_and_says_so(survey: Path) -> None:
    sub = survey / "data"
    result = holotype("check", "--format", "json", cwd=sub)
    assert result.returncode == 0, result.stderr
    assert json.loads(result.stdout)["ok"] is True
    assert f"project: {survey}" in result.stderr
    at_root = holotype("check", "--format", "json", cwd=survey)
    assert "project:" not in at_root.stderr


def test_project_in_pyproject_is_found_from_below(tmp_path: Path) -> None:
    root = tmp_path / "p"
    write(root / "pyproject.toml", '[project]\nname = "p"\n\n[tool.holotype]\ndata = []\nseed = 4\n')
    (root / "notebooks").mkdir()
    result = holotype("record", "--no-run", cwd=root / "notebooks")
    assert result.returncode == 0, result.stderr
    assert (root / "holotype.lock").is_file() and not (root / "notebooks" / "holotype.lock").exists()


def test_text_through_a_pipe_keeps_long_paths_whole(survey: Path) -> None:
    name = f"data/{LONG}/depth_measurements_of_every_lake.csv"
    write(survey / name, "x\n1\n")
    result = holotype("check", "-C", survey)
    assert result.returncode == 0
    assert name in result.stdout  # not folded at 80 columns, not cut
    assert all("…" not in line for line in result.stdout.splitlines() if "depth_measurements" in line)


def test_output_file_and_the_terminal_table_for_every_findings_command(survey: Path, tmp_path: Path) -> None:
    for command in ("check", "replay"):
        target = tmp_path / f"{command}.json"
        result = run_cli(command, "-C", survey, "--output", target)
        assert result.code == 0 and json.loads(target.read_text())["command"] == command
        assert "0 fail" in result.out  # the human table still reaches the terminal


# ----------------------------------------------------------------------------- summary lines and plans


def test_summary_line_uses_severity_words(survey: Path) -> None:
    result = run_cli("replay", "-C", survey)
    last = result.out.strip().splitlines()[-1]
    assert last.startswith("reproduced · 0 fail · 0 warn · ") and last.endswith(" info")
    assert "failed," not in result.out and "notes" not in last
    md = run_cli("replay", "-C", survey, "--format", "markdown").out
    assert "reproduced · 0 fail · 0 warn ·" in md


def test_dry_run_prints_a_plan_not_a_verdict(survey: Path) -> None:
    result = run_cli("replay", "--dry-run", "-C", survey)
    assert result.code == 0
    last = result.out.strip().splitlines()[-1]
    assert last.startswith("plan only, nothing was run") and "reproduced" not in result.out
    assert sys.executable in result.out  # which interpreter, and how it was chosen
    assert "python in the config" in result.out


def test_failed_record_does_not_claim_to_have_stored_outputs(survey: Path) -> None:
    write(survey / "run.py", "import sys\nsys.exit('no depth column')\n")
    result = run_cli("record", "-C", survey)
    assert result.code == 1
    assert "stored" not in result.out and "nothing written" in result.out


def test_twice_reports_each_nondeterministic_output_once(tmp_path: Path) -> None:
    root = tmp_path / "nd"
    write(root / "data" / "a.csv", "x\n1\n")
    write(root / "s.py", "import os\nos.makedirs('r', exist_ok=True)\n"
                         "for n in 'ab':\n    open(f'r/{n}.csv', 'w').write('v\\n%r\\n' % "
                         "(int.from_bytes(os.urandom(4), 'big') / 2**32))\n")
    write(root / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 3\n'
                                  '[analyses.s]\ncommand = "python s.py"\noutputs = ["r/a.csv", "r/b.csv"]\n')
    assert run_cli("record", "-C", root).code == 0
    findings = json.loads(run_cli("replay", "--twice", "-C", root, "--format", "json").out)["findings"]
    failing = [f for f in findings if f["severity"] == "fail"]
    assert len(failing) == 2 and {f["kind"] for f in failing} == {"analysis.nondeterministic"}
    assert sum("r/a.csv" in f["message"] or f["subject"] == "r/a.csv" for f in failing) == 1


def test_missing_interpreter_names_recreate(survey: Path) -> None:
    text = (survey / "holotype.toml").read_text().replace(sys.executable, ".venv/bin/python")
    (survey / "holotype.toml").write_text(text)
    result = run_cli("check", "-C", survey)
    assert result.code == 2 and "holotype recreate" in result.err


# ----------------------------------------------------------------------------- inputs read once


def test_compare_reads_a_pipe_once(tmp_path: Path) -> None:
    # as the shell's process substitution gives it: holotype compare <(zcat baseline.csv.gz) new.csv
    import threading

    good = write(tmp_path / "good.csv", "a,b\n1,2\n3,4\n")
    read_end, write_end = os.pipe()
    feeder = threading.Thread(target=lambda: (os.write(write_end, good.read_bytes()), os.close(write_end)))
    feeder.start()
    result = subprocess.run([sys.executable, "-m", "holotype", "compare", f"/dev/fd/{read_end}", str(good),
                             "--format", "json"], pass_fds=(read_end,), capture_output=True, text=True)
    feeder.join(timeout=10)
    os.close(read_end)
    assert result.returncode == 0, result.stdout + result.stderr
    assert json.loads(result.stdout)["ok"] is True


# ----------------------------------------------------------------------------- formats honour or refuse rule keys


def test_parquet_rows_matched_by_key_like_csv(tmp_path: Path) -> None:
    pd = pytest.importorskip("pandas")
    pytest.importorskip("pyarrow")
    frame = pd.DataFrame({"lake": ["A", "B", "C"], "depth": [1.5, 2.5, 4.0]})
    shuffled = frame.iloc[[2, 0, 1]]
    frame.to_parquet(tmp_path / "e.parquet")
    shuffled.to_parquet(tmp_path / "a.parquet")
    frame.to_csv(tmp_path / "e.csv", index=False)
    shuffled.to_csv(tmp_path / "a.csv", index=False)
    for suffix in ("csv", "parquet"):
        result = run_cli("compare", tmp_path / f"e.{suffix}", tmp_path / f"a.{suffix}", "--key", "lake")
        assert result.code == 0, (suffix, result.out)
        by_position = run_cli("compare", tmp_path / f"e.{suffix}", tmp_path / f"a.{suffix}")
        assert by_position.code == 1, suffix


def test_a_rule_key_a_format_cannot_honour_is_refused(tmp_path: Path) -> None:
    e = write(tmp_path / "e.json", '{"p": 0.5}')
    a = write(tmp_path / "a.json", '{"p": 0.5000001}')
    result = run_cli("compare", e, a, "--key", "lake", "--format", "json")
    [finding] = json.loads(result.out)["findings"]
    assert result.code == 1 and finding["kind"] == "output.rule" and "key" in finding["message"]


# ----------------------------------------------------------------------------- lockfile format


def test_format_1_lock_is_read_and_said_once(tmp_path: Path) -> None:
    root = tmp_path / "proj"
    shutil.copytree(FIXTURES / "notebook-project", root)
    shutil.copy(FIXTURES / "locks" / "format1.lock", root / "holotype.lock")
    result = run_cli("diff", root / "holotype.lock", root / "holotype.lock", "--format", "json")
    assert result.code == 0, result.err
    notices = [line for line in result.err.splitlines() if "format 1" in line]
    assert len(notices) == 2 and json.loads(result.out)["ok"] is True  # once per lock read (A and B)
    from holotype.lockfile import read_lock

    lock = read_lock(root / "holotype.lock")
    assert lock.analyses and all(a.command.startswith("python") for a in lock.analyses.values())
    assert any(p.origin.kind == "vcs" for p in lock.packages.values())


# ----------------------------------------------------------------------------- errors and the API


def test_every_error_a_user_can_cause_is_a_holotype_error() -> None:
    from holotype import errors

    classes = [v for v in vars(errors).values() if isinstance(v, type) and issubclass(v, Exception)
               and v.__module__ == "holotype.errors"]
    assert len(classes) >= 8 and all(issubclass(c, errors.HolotypeError) for c in classes)
    assert all(c("x").exit_code == 2 for c in classes if c is not errors.UnreadableOutput)


def test_python_api_as_a_notebook_uses_it(survey: Path, tmp_path: Path) -> None:
    expected = write(tmp_path / "e.csv", "lake,depth\nA,1.0\n")
    actual = write(tmp_path / "a.csv", "lake,depth\nA,1.0000001\n")
    code = f"""
import holotype
assert set(holotype.__all__) >= {{"compare_results", "check", "replay", "load_project", "Judgement", "Finding", "HolotypeError"}}
e = {str(expected)!r}
a = {str(actual)!r}
assert holotype.compare_results(e, a, rtol=1e-3).ok
assert not holotype.compare_results(e, a).ok
assert holotype.load_project({str(survey)!r}).analyses[0].command == "python run.py"
assert holotype.check({str(survey)!r}).ok and holotype.replay({str(survey)!r}).ok
try:
    holotype.compare_results(e, "/nonexistent/x.csv")
except holotype.HolotypeError as exc:
    print("refused:", exc)
"""
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert "refused: /nonexistent/x.csv: no such file or folder" in proc.stdout


def test_appendix_names_rules_settings_and_labels_whole(tmp_path: Path) -> None:
    root = tmp_path / "lab"
    write(root / "data" / "a.csv", "x\n1\n")
    write(root / "run.py", "import os\nos.makedirs('results/descriptive_statistics', exist_ok=True)\n"
                           "open('results/descriptive_statistics/by_lake_and_season.csv', 'w').write('PC1,n\\n0.5,3\\n')\n"
                           "open('results/model.bin', 'wb').write(bytes([1, 2, 3]))\n")
    write(root / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 9\nthreads = 1\n'
                                  'seed_globals = true\n\n[[rules]]\nmatch = "results/*/*.csv:PC*"\nsign_free = true\n'
                                  'rtol = 1e-6\n\n[analyses.mean]\ncommand = "python run.py"\n'
                                  'outputs = ["results/descriptive_statistics/by_lake_and_season.csv", '
                                  '"results/model.bin"]\n')
    assert run_cli("record", "-C", root).code == 0
    write(root / "run.py", (root / "run.py").read_text().replace("bytes([1, 2, 3])", "bytes([1, 2, 4])"))
    assert run_cli("replay", "-C", root).code == 1
    html = run_cli("report", "--format", "html", "-C", root).out
    assert "by_lake_and_season.csv</text>" in html and ">esults/" not in html  # cut in the middle, not the left
    assert "bytes differ" in html and "exact (fails)" not in html
    assert "PC*: rtol=1e-06, atol=1e-12, sign-free" in html or "PC*: atol=1e-12, rtol=1e-06, sign-free" in html
    assert "threads pinned to 1" in html and "seed_globals = true" in html
    md = run_cli("report", "-C", root).out
    assert "threads pinned to 1" in md and "NOT reproduced (not reproduced · 1 fail" in md
