"""A green check must mean nothing that matters moved (the gate-integrity work, in progress)."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

from conftest import one_analysis_project, run_cli, write
from holotype.lockfile import read_lock


def test_an_output_inside_a_data_folder_is_not_data(tmp_path: Path) -> None:
    write(tmp_path / "data" / "raw.csv", "x\n1\n")
    write(tmp_path / "clean.py", "import os\nos.makedirs('data/processed', exist_ok=True)\n"
                                 "open('data/processed/clean.csv', 'w').write('x\\n1\\n')\n")
    write(tmp_path / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 1\n'
                                      '[analyses.clean]\ncommand = "python clean.py"\n'
                                      'outputs = ["data/processed/clean.csv"]\n')
    assert run_cli("record", "-C", tmp_path).code == 0
    lock = read_lock(tmp_path / "holotype.lock")
    assert "data/raw.csv" in lock.data and "data/processed/clean.csv" not in lock.data
    result = run_cli("check", "--strict", "-C", tmp_path, "--format", "json")
    assert result.code == 0, result.out
    assert not [f for f in json.loads(result.out)["findings"] if f["area"] == "data"]


def test_an_executed_notebook_written_under_a_code_folder_is_not_code(tmp_path: Path) -> None:
    write(tmp_path / "data" / "raw.csv", "x\n1\n")
    write(tmp_path / "analysis" / "make.py", "import os, json\nos.makedirs('analysis/executed', exist_ok=True)\n"
                                              "json.dump({'cells': [], 'metadata': {}, 'nbformat': 4, "
                                              "'nbformat_minor': 5}, open('analysis/executed/run.ipynb', 'w'))\n")
    write(tmp_path / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 1\n'
                                      '[analyses.nb]\ncommand = "python analysis/make.py"\n'
                                      'outputs = ["analysis/executed/run.ipynb"]\n')
    assert run_cli("record", "-C", tmp_path).code == 0
    assert "analysis/executed/run.ipynb" not in read_lock(tmp_path / "holotype.lock").code
    assert run_cli("check", "--strict", "-C", tmp_path).code == 0  # not "modified" right after the record


def test_a_data_pattern_naming_an_output_is_a_config_error(tmp_path: Path) -> None:
    write(tmp_path / "data" / "raw.csv", "x\n1\n")
    write(tmp_path / "holotype.toml", 'data = ["data", "results/*.csv"]\nseed = 1\n'
                                      '[analyses.s]\ncommand = "python s.py"\noutputs = ["results/summary.csv"]\n')
    result = run_cli("record", "--no-run", "-C", tmp_path)
    assert result.code == 2
    assert "'results/*.csv'" in result.err and "'results/summary.csv'" in result.err and "analysis 's'" in result.err


def judged_project(root: Path) -> Path:
    write(root / "data" / "a.csv", "x\n1\n")
    write(root / "run.py", "import os\nos.makedirs('out', exist_ok=True)\nopen('out/r.csv', 'w').write('PC1,v\\n1,2\\n')\n")
    write(root / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 1\nthreads = 1\n'
                                  'seed_globals = true\n\n[tolerance]\nrtol = 1e-9\natol = 1e-12\n\n'
                                  '[[rules]]\nmatch = "out/r.csv:PC*"\nrtol = 1e-6\n\n'
                                  '[analyses.a]\ncommand = "python run.py"\noutputs = ["out/r.csv"]\ntimeout = 60\n')
    assert run_cli("record", "-C", root).code == 0
    return root


def configure(root: Path, old: str, new: str) -> None:
    text = (root / "holotype.toml").read_text()
    assert old in text
    (root / "holotype.toml").write_text(text.replace(old, new))


def judgement_findings(root: Path) -> tuple[int, list[dict[str, str]]]:
    result = run_cli("check", "-C", root, "--format", "json")
    return result.code, [f for f in json.loads(result.out)["findings"] if f["area"] == "judgement"]


def test_a_loosened_tolerance_and_seeding_fail_the_check(tmp_path: Path) -> None:
    root = judged_project(tmp_path / "p")
    assert judgement_findings(root) == (0, [])
    configure(root, "rtol = 1e-9", "rtol = 0.05")
    configure(root, "seed_globals = true", "seed_globals = false")
    code, found = judgement_findings(root)
    assert code == 1
    loosened = {f["subject"]: f["message"] for f in found if f["kind"] == "judgement.loosened"}
    assert "rtol 1e-09 → 0.05" in loosened["out/r.csv"]
    assert "seed_globals" in loosened and all(f["severity"] == "fail" for f in found)


def test_a_rule_that_reaches_more_a_dropped_thread_pin_and_a_downgraded_failure_fail(tmp_path: Path) -> None:
    root = judged_project(tmp_path / "p")
    configure(root, 'match = "out/r.csv:PC*"\nrtol = 1e-6', 'match = "out/r.csv:PC*"\nrtol = 1e-6\nsign_free = true')
    configure(root, "threads = 1\n", "")
    configure(root, "[tolerance]", '[policy]\n"output.mismatch" = "warn"\n\n[tolerance]')
    code, found = judgement_findings(root)
    kinds = {f["subject"]: f["kind"] for f in found}
    assert code == 1
    assert kinds["out/r.csv:PC*"] == "judgement.loosened"
    assert kinds["threads"] == "judgement.loosened" and kinds["policy.output.mismatch"] == "judgement.loosened"


def test_tightening_warns_and_a_changed_timeout_is_said(tmp_path: Path) -> None:
    root = judged_project(tmp_path / "p")
    configure(root, "rtol = 1e-9", "rtol = 1e-12")
    configure(root, "timeout = 60", "timeout = 30")
    code, found = judgement_findings(root)
    assert code == 0 and [f["kind"] for f in found] == ["judgement.tightened"]
    assert "timeout 60.0 recorded, 30.0 in the config" in run_cli("check", "-C", root).out


def test_diff_shows_a_loosened_judgement_between_two_records(tmp_path: Path) -> None:
    root = judged_project(tmp_path / "p")
    (tmp_path / "before.lock").write_bytes((root / "holotype.lock").read_bytes())
    configure(root, "rtol = 1e-9", "rtol = 0.05")
    assert run_cli("record", "-C", root).code == 0
    result = run_cli("diff", tmp_path / "before.lock", root / "holotype.lock", "--format", "json")
    found = [f for f in json.loads(result.out)["findings"] if f["kind"] == "judgement.loosened"]
    assert result.code == 1 and found and "0.05" in found[0]["message"]


def test_a_second_record_leaves_a_trace_and_tidy_lists_then_removes_old_baselines(tmp_path: Path,
                                                                                   monkeypatch: object) -> None:
    root = one_analysis_project(tmp_path / "p", "import os\nos.makedirs('out', exist_ok=True)\n"
                                "open('out/r.csv', 'w').write('v\\n' + os.environ.get('V', '1') + '\\n')\n",
                                ("out/r.csv",))
    assert run_cli("record", "-C", root).code == 0
    first = read_lock(root / "holotype.lock").analyses["a"].outputs["out/r.csv"].sha256
    monkeypatch.setenv("V", "2")  # type: ignore[attr-defined]
    again = run_cli("record", "-C", root)
    assert again.code == 0 and "1 baseline object(s) are no longer referenced" in again.out
    lock = read_lock(root / "holotype.lock")
    assert [h.reason for h in lock.history] == ["holotype record", "holotype record"]
    assert [tuple(c) for c in lock.history[-1].changes] == [("out/r.csv", first, lock.analyses["a"].outputs[
        "out/r.csv"].sha256)]
    listing = run_cli("tidy", "-C", root, "--format", "json")
    [stale] = json.loads(listing.out)["findings"]
    assert listing.code == 0 and stale["expected"] == first and "not referenced" in stale["message"]
    from holotype.store import BaselineStore

    assert BaselineStore(root).has(first)  # listing removes nothing
    assert run_cli("tidy", "--remove", "-C", root).code == 0
    assert not BaselineStore(root).has(first) and run_cli("check", "-C", root).code == 0
    assert "no unreferenced baseline objects" in run_cli("tidy", "-C", root).out


def adoptable(root: Path) -> Path:
    one_analysis_project(root, "import csv, os\nrows = list(csv.DictReader(open('data/depths.csv')))\n"
                         "os.makedirs('out', exist_ok=True)\n"
                         "open('out/mean.csv', 'w').write('mean\\n%r\\n' % (sum(float(r['depth']) for r in rows) / "
                         "len(rows)))\n", ("out/mean.csv",), name="m",
                         data=(("data/depths.csv", "lake,depth\nA,1.5\nB,25.0\n"),),
                         analysis='inputs = ["data/depths.csv"]\n')
    assert run_cli("record", "-C", root).code == 0
    return root


def test_corrected_data_replayed_and_adopted_checks_clean_with_the_reason_once(tmp_path: Path) -> None:
    root = adoptable(tmp_path / "p")
    (root / "data" / "depths.csv").write_text("lake,depth\nA,1.5\nB,2.5\n")  # a transcription error fixed
    assert run_cli("replay", "-C", root).code == 1
    adopted = run_cli("adopt", "-C", root, "--reason", "corrected a transcription error", "--format", "json")
    assert adopted.code == 0, adopted.err
    assert any(f["subject"] == "data/depths.csv" and "re-recorded" in f["message"]
               for f in json.loads(adopted.out)["findings"])
    assert run_cli("check", "--strict", "-C", root).code == 0  # data and baselines agree again
    assert run_cli("replay", "-C", root).code == 0
    reasons = [h.reason for h in read_lock(root / "holotype.lock").history]
    assert reasons.count("corrected a transcription error") == 1


def test_adopt_refuses_an_output_edited_after_the_replay(tmp_path: Path) -> None:
    root = adoptable(tmp_path / "p")
    refused = run_cli("adopt", "-C", root, "--reason", "x")
    assert refused.code == 2 and "no replay in this checkout produced" in refused.err  # never replayed
    assert run_cli("replay", "-C", root).code == 0
    (root / "out" / "mean.csv").write_text("mean\n0.001\n")  # a p-value "improved" by hand
    result = run_cli("adopt", "-C", root, "--reason", "x")
    assert result.code == 2 and "out/mean.csv" in result.err and "changed since the replay" in result.err
    assert len(result.err.strip().splitlines()) == 1
    assert run_cli("check", "--full", "-C", root).code == 0  # the lock and baselines were left alone


SEEDED = ("import os\nfrom holotype import seeds\nos.makedirs('out', exist_ok=True)\n"
          "open('out/s.txt', 'w').write(str(seeds.seed()))\n")


def test_holotype_is_the_instrument_not_the_analysis(tmp_path: Path) -> None:
    root = tmp_path / "p"
    write(root / "data" / "a.csv", "x\n1\n")
    write(root / "run.py", SEEDED)
    write(root / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 3\n'
                                  '[analyses.a]\ncommand = "python run.py"\noutputs = ["out/s.txt"]\n')
    assert run_cli("record", "-C", root).code == 0
    packages = read_lock(root / "holotype.lock").packages
    assert packages["holotype"].used  # imported directly
    assert not any(packages[name].used for name in ("click", "rich", "pandas", "numpy") if name in packages)


def test_holotype_seeds_works_in_an_environment_without_holotype(tmp_path: Path, wheelhouse: Path) -> None:
    from conftest import make_venv
    from holotype.seeds import derive_seed

    venv = make_venv(tmp_path / "venv", wheelhouse)  # holotype is not installed there
    root = tmp_path / "p"
    write(root / "data" / "a.csv", "x\n1\n")
    write(root / "run.py", SEEDED)
    write(root / "holotype.toml", f'python = "{venv.python}"\ndata = ["data"]\nseed = 3\n'
                                  '[analyses.a]\ncommand = "python run.py"\noutputs = ["out/s.txt"]\n')
    result = run_cli("record", "-C", root)
    assert result.code == 0, result.out
    assert (root / "out" / "s.txt").read_text() == str(derive_seed(3, "a"))
    assert "holotype" not in read_lock(root / "holotype.lock").packages


def test_a_lazily_imported_dependency_counts_as_used(tmp_path: Path, wheelhouse: Path) -> None:
    from conftest import build_wheel, make_venv

    wheels = tmp_path / "wheels"
    build_wheel(wheels, "lazyplot", "1.0", module_text="def draw():\n    import gamma\n    return gamma.VERSION\n")
    venv = make_venv(tmp_path / "venv", wheelhouse)
    venv.install("gamma==1.0", "--find-links", str(wheels), "lazyplot")
    root = one_analysis_project(tmp_path / "p", "import os, lazyplot\nos.makedirs('out', exist_ok=True)\n"
                                "open('out/v.txt', 'w').write(lazyplot.draw())\n", ("out/v.txt",),
                                python=venv.python, seed=3)
    assert run_cli("record", "--no-run", "-C", root).code == 0
    assert not read_lock(root / "holotype.lock").packages["gamma"].used  # the static scan cannot see it
    assert run_cli("record", "-C", root).code == 0
    assert read_lock(root / "holotype.lock").packages["gamma"].used  # the run-time hook did


def test_record_no_run_with_changed_data_warns_and_check_reports_stale_baselines(tmp_path: Path) -> None:
    root = adoptable(tmp_path / "p")
    assert run_cli("check", "-C", root).code == 0
    (root / "data" / "depths.csv").write_text("lake,depth\nA,1.5\nB,2.5\n")
    result = run_cli("record", "--no-run", "-C", root, "--format", "json")
    assert result.code == 0
    [warned] = [f for f in json.loads(result.out)["findings"] if f["kind"] == "analysis.baselines_older"]
    assert warned["severity"] == "warn" and warned["subject"] == "m"
    check = run_cli("check", "-C", root, "--format", "json")
    [stale] = [f for f in json.loads(check.out)["findings"] if f["kind"] == "analysis.stale"]
    assert check.code == 1 and stale["subject"] == "m" and "other data" in stale["message"]
    assert run_cli("replay", "-C", root).code == 1  # the baselines indeed come from the old data
    assert run_cli("adopt", "-C", root, "--reason", "new depths").code == 0
    assert run_cli("check", "-C", root).code == 0


def test_diff_rev_after_adopt_is_numeric_and_does_not_fail(tmp_path: Path) -> None:
    import os
    import subprocess

    root = adoptable(tmp_path / "p")

    def git(*args: str) -> None:
        subprocess.run(["git", *args], cwd=root, check=True, capture_output=True,
                       env={**os.environ, "GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.org",
                            "GIT_COMMITTER_NAME": "t", "GIT_COMMITTER_EMAIL": "t@example.org"})

    git("init", "-q")
    git("add", "-A")
    git("commit", "-qm", "recorded")
    (root / "data" / "depths.csv").write_text("lake,depth\nA,1.5\nB,2.5\n")
    assert run_cli("replay", "-C", root).code == 1
    assert run_cli("adopt", "-C", root, "--reason", "corrected a transcription error").code == 0
    result = run_cli("diff", "--rev", "HEAD", "-C", root, "--format", "json")
    assert result.code == 0, result.out
    [adopted] = [f for f in json.loads(result.out)["findings"] if f["subject"] == "out/mean.csv"]
    assert adopted["kind"] == "output.adopted" and "corrected a transcription error" in adopted["message"]
    assert adopted["max_rel_err"] > 0 and "values outside tolerance" in adopted["message"]  # real figures


def test_markers_that_call_everything_requested_are_replaced_by_what_the_project_asks_for() -> None:
    from holotype.capture.usage import truthful_requested
    from holotype.records import Environment, Interpreter, PackageRecord, PlatformInfo

    names = ["alpha", "beta", "gamma", "delta", "epsilon", "zeta"]
    env = Environment(Interpreter("cpython", "3.11.7"), PlatformInfo("Linux", "6", "x86_64"),
                      {n: PackageRecord(n, "1.0", requested=True, top_level=(n,)) for n in names})
    fixed, source = truthful_requested(env, {"alpha", "os"}, ["gamma>=1"])
    assert source == "declared dependencies and imports"
    assert {n for n, p in fixed.packages.items() if p.requested} == {"alpha", "gamma"}
    some = Environment(env.interpreter, env.platform, {**env.packages, "eta": PackageRecord("eta", "1.0")})
    assert truthful_requested(some, {"alpha"}, []) == (some, "installer")  # markers that discriminate are kept


def test_a_change_of_installer_is_information(tmp_path: Path) -> None:
    root = adoptable(tmp_path / "p")
    lock = read_lock(root / "holotype.lock")
    name, pkg = next((n, p) for n, p in sorted(lock.packages.items()) if p.installer)
    text = (root / "holotype.lock").read_text()
    block = text.index(f"[packages.{name}]")
    start = text.index(f'installer = "{pkg.installer}"', block)
    (root / "holotype.lock").write_text(text[:start] + 'installer = "another-installer"' +
                                        text[start + len(f'installer = "{pkg.installer}"'):])
    result = run_cli("check", "-C", root, "--format", "json")
    [changed] = [f for f in json.loads(result.out)["findings"] if f["kind"] == "package.installer"]
    assert changed["severity"] == "info" and changed["subject"] == name and result.code == 0
    assert read_lock(root / "holotype.lock").requested_from in ("installer", "declared dependencies and imports")


def _importing(root: Path, python: Path, module: str) -> Path:
    one_analysis_project(root, f"import os, {module}\nos.makedirs('out', exist_ok=True)\n"
                               f"open('out/v.txt', 'w').write(repr({module}.VERSION))\n", ("out/v.txt",), python=python)
    result = run_cli("record", "-C", root)
    assert result.code == 0, result.out
    return root


@pytest.mark.parametrize("trust", ["fresh files", "cached answers"])
def test_a_byte_changed_inside_an_installed_wheel_fails_naming_the_file(tmp_path: Path, wheelhouse: Path,
                                                                       monkeypatch: pytest.MonkeyPatch,
                                                                       trust: str) -> None:
    from conftest import make_venv

    if trust == "cached answers":  # files just installed are never trusted from the cache; here they are
        monkeypatch.setattr("holotype.capture.installed.RACY_SECONDS", 0)
        monkeypatch.setattr("holotype.capture.digest_cache.RACY_SECONDS", 0)
        monkeypatch.setattr("holotype.capture.hashing.RACY_SECONDS", 0)  # the packages' identity stamps
    venv = make_venv(tmp_path / "venv", wheelhouse)
    venv.install("alpha==1.0", "gamma==1.0")  # alpha requires beta; gamma is not used
    root = _importing(tmp_path / "p", venv.python, "alpha")
    assert run_cli("check", "--strict", "-C", root).code == 0
    assert run_cli("check", "--strict", "-C", root).code == 0  # the second answered from the cache
    if trust == "cached answers":
        import json

        import holotype.capture.installed as installed
        from holotype.capture.digest_cache import DigestCache

        answer = json.loads(DigestCache().fact(f"installed:{venv.site / 'beta-2.0.dist-info'}") or "{}")
        assert "beta/__init__.py" in answer["paths"] and answer["record"]
        read: list[Path] = []
        real = installed.cached_listing
        monkeypatch.setattr(installed, "cached_listing", lambda d, c: read.append(d) or real(d, c))
        assert run_cli("check", "--strict", "-C", root).code == 0
        assert venv.site / "beta-2.0.dist-info" not in read  # answered without reading its listing again
    module = venv.site / "beta" / "__init__.py"  # a used package's dependency
    original = module.read_bytes()
    module.write_bytes(original + b"THRESHOLD = 0.6\n")
    for full in ((), ("--full",)):
        result = run_cli("check", *full, "-C", root)
        assert result.code == 1, result.out
        assert "beta/__init__.py" in result.out and "FAIL" in result.out
    module.write_bytes(original)
    assert run_cli("check", "--strict", "-C", root).code == 0
    other = venv.site / "gamma" / "__init__.py"
    other.write_text("VERSION = 'patched'\n")
    result = run_cli("check", "-C", root)
    assert result.code == 0 and "gamma/__init__.py" in result.out  # an unrelated package warns


def test_a_byte_changed_inside_an_editable_package_fails_naming_the_file(tmp_path: Path, wheelhouse: Path) -> None:
    from conftest import make_venv

    venv = make_venv(tmp_path / "venv", wheelhouse)
    source = tmp_path / "helper"
    write(source / "src" / "helper" / "__init__.py", "VERSION = 1\nTHRESHOLD = 0.5\n")
    write(source / "README.md", "A helper.\n")
    venv.install_editable("helper", source, source / "src")
    root = _importing(tmp_path / "p", venv.python, "helper")
    packages = read_lock(root / "holotype.lock").packages
    assert packages["helper"].used and set(packages["helper"].tree) == {"src/helper/__init__.py"}
    assert run_cli("check", "--strict", "-C", root).code == 0
    (source / "README.md").write_text("A helper, documented.\n")  # not code: no finding
    assert run_cli("check", "--strict", "-C", root).code == 0
    (source / "src" / "helper" / "__init__.py").write_text("VERSION = 1\nTHRESHOLD = 0.6\n")
    result = run_cli("check", "-C", root)
    assert result.code == 1, result.out
    assert "src/helper/__init__.py" in result.out and "editable" in result.out


def test_record_says_when_installed_files_already_differ_from_the_installer(tmp_path: Path,
                                                                          wheelhouse: Path) -> None:
    from conftest import make_venv

    venv = make_venv(tmp_path / "venv", wheelhouse)
    venv.install("alpha==1.0")
    (venv.site / "alpha" / "__init__.py").write_text("VERSION = 'edited by hand'\n")
    root = tmp_path / "p"
    one_analysis_project(root, "import alpha, os\nos.makedirs('out', exist_ok=True)\nopen('out/v.txt', 'w')\n",
                         ("out/v.txt",), python=venv.python)
    result = run_cli("record", "-C", root)
    assert result.code == 0 and "alpha/__init__.py" in result.out and "installer" in result.out
    assert read_lock(root / "holotype.lock").packages["alpha"].edited == ("alpha/__init__.py",)
    assert run_cli("check", "--strict", "-C", root).code == 0  # recorded as found: not a change since


def test_replay_after_a_downgrade_shows_the_drift_beside_the_outputs(tmp_path: Path, wheelhouse: Path) -> None:
    from conftest import make_venv

    venv = make_venv(tmp_path / "venv", wheelhouse)
    venv.install("alpha==1.0", "beta==2.0", "gamma==2.0")  # alpha requires beta; gamma is not used
    root = _importing(tmp_path / "p", venv.python, "beta")
    venv.install("beta==1.0", "gamma==1.0")
    result = run_cli("replay", "-C", root, "--format", "json")
    assert result.code == 1, result.out
    drift = [f for f in json.loads(result.out)["findings"] if f["kind"] == "environment.drift"]
    [beta] = [f for f in drift if f["subject"] == "beta"]
    assert "2.0 recorded, 1.0 now (downgraded)" in beta["message"] and "used by a (failed)" in beta["message"]
    assert beta["severity"] == "info"
    assert [f["message"] for f in drift if f["subject"] == "other packages"] == [
        "1 other package changed that no replayed analysis uses ('holotype check' lists them)"]
    text = run_cli("replay", "-C", root).out
    assert "environment" in text and "beta" in text
