"""`holotype pinpoint`: the search, and the whole command on invented packages built inside the test."""

from __future__ import annotations

import math
import subprocess
import time

import pytest

from holotype.search import smallest_cause


@pytest.mark.parametrize("n", [1, 2, 5, 6, 16])
def test_one_culprit_is_found_within_log2_n_plus_2_runs(n: int) -> None:
    for culprit in range(n):
        result = smallest_cause(list(range(n)), lambda s, c=culprit: c in s, budget=100)
        assert result.culprits == [culprit] and result.proven
        assert result.runs <= math.ceil(math.log2(n)) + 2 if n > 1 else result.runs <= 2


def test_two_changes_that_move_only_together_are_named_as_a_pair() -> None:
    for pair in [(0, 5), (1, 2), (3, 4), (0, 1)]:
        result = smallest_cause(list(range(6)), lambda s, p=pair: set(p) <= set(s), budget=100)
        assert sorted(result.culprits) == list(pair) and result.proven


def test_a_move_no_change_explains_is_not_blamed_on_one() -> None:
    result = smallest_cause(list(range(4)), lambda s: True, budget=100)  # moves whatever is applied
    assert result.complement_moves and not result.proven


def test_the_budget_bounds_the_runs_and_says_so() -> None:
    result = smallest_cause(list(range(16)), lambda s: {3, 11} <= set(s), budget=4)
    assert result.exhausted and result.runs == 4 and not result.proven


# ----------------------------------------------------------------------------- the whole command, offline

import json  # noqa: E402
import os  # noqa: E402
from pathlib import Path  # noqa: E402

from conftest import build_wheel, built_once, make_venv, run_cli, write  # noqa: E402
from holotype.run.overlays import overlay_root  # noqa: E402

SIX = [f"lake-tool-{i}" for i in range(1, 7)]
CULPRIT = "lake-tool-4"
VALUE = ("import json, os\n" + "".join(f"import lake_tool_{i}\n" for i in range(1, 7)) +
         "value = 0.25\n" + "".join(f"value *= lake_tool_{i}.FACTOR\n" for i in range(1, 7)) +
         "value *= 2.0 if lake_tool_pair_a.NEW and lake_tool_pair_b.NEW else 1.0\n"
         "os.makedirs('results', exist_ok=True)\n"
         "json.dump({'turbidity': value}, open('results/turbidity.json', 'w'))\n")


@pytest.fixture(scope="session")
def lakes(tmp_path_factory: pytest.TempPathFactory) -> dict[str, object]:
    return dict(built_once(tmp_path_factory, "pinpoint-lakes", _build_lakes))


def _build_lakes(base: Path) -> dict[str, Path]:
    """A venv of invented packages at 1.0, three recorded projects, then every package upgraded to 2.0:
    only lake-tool-4 2.0 changes the number alone; the pair changes it only together."""
    wheels = base / "wheels"
    for name in SIX:
        build_wheel(wheels, name, "1.0", module_text="FACTOR = 1.0\n")
        build_wheel(wheels, name, "2.0", module_text="FACTOR = 1.5\n" if name == CULPRIT else "FACTOR = 1.0\n")
    for name in ("lake-tool-pair-a", "lake-tool-pair-b"):
        build_wheel(wheels, name, "1.0", module_text="NEW = False\n")
        build_wheel(wheels, name, "2.0", module_text="NEW = True\n")
    venv = make_venv(base / "venv", wheels)
    every = [*SIX, "lake-tool-pair-a", "lake-tool-pair-b"]
    venv.install(*(f"{n}==1.0" for n in every))
    projects = {}
    scripts = {"single": VALUE.replace("lake_tool_pair_a.NEW and ", "False and "),
               "pair": VALUE.replace("value *= lake_tool_4.FACTOR\n", ""),
               "noisy": VALUE + "json.dump({'turbidity': os.urandom(4).hex()}, open('results/turbidity.json', 'w'))\n"}
    scripts["two"] = (VALUE.replace("lake_tool_pair_a.NEW and ", "False and ") +
                      "pair = 2.0 if lake_tool_pair_a.NEW and lake_tool_pair_b.NEW else 1.0\n"
                      "json.dump({'clarity': pair}, open('results/clarity.json', 'w'))\n")
    for name, script in scripts.items():
        root = base / name
        write(root / "data" / "secchi.csv", "site,depth\nnorth,2.5\n")
        (root / "run.py").write_text("import lake_tool_pair_a, lake_tool_pair_b\n" + script)
        outputs = '"results/turbidity.json", "results/clarity.json"' if name == "two" else '"results/turbidity.json"'
        write(root / "holotype.toml", f'python = "{venv.python}"\ndata = ["data"]\nseed = 7\n\n'
              f'[analyses.turbidity]\ncommand = "python run.py"\noutputs = [{outputs}]\n')
        assert run_cli("record", "-C", root).code == 0
        projects[name] = root
    venv.install("--upgrade", *(f"{n}==2.0" for n in every))  # after the record: everything upgraded
    return {"wheels": wheels, **projects}


def pinpoint(root: Path, wheels: object, *extra: str) -> tuple[int, dict, str]:
    assert run_cli("replay", "-C", root).code == 1
    result = run_cli("pinpoint", "-C", root, "--no-index", "--find-links", str(wheels), "--format", "json", *extra)
    assert result.code in (0, 1), result.err
    return result.code, json.loads(result.out), result.err


@pytest.mark.slow
def test_pinpoint_names_the_one_package_that_moves_the_number(lakes: dict[str, object]) -> None:
    root = lakes["single"]
    assert isinstance(root, Path)
    stale = overlay_root() / "999999999-1"  # left by an interrupted session (no such process)
    stale.mkdir(parents=True, exist_ok=True)
    lock_before = (root / "holotype.lock").read_bytes()
    code, doc, err = pinpoint(root, lakes["wheels"])
    output_after_replay = (root / "results" / "turbidity.json").read_bytes()
    causes = [f for f in doc["findings"] if f["kind"] == "pinpoint.cause"]
    assert code == 1 and len(causes) == 1, doc
    assert causes[0]["subject"] == CULPRIT and "lake-tool-4 1.0 → 2.0" in causes[0]["message"]
    assert "all outputs reproduce" in causes[0]["message"]
    runs = [line for line in err.splitlines() if line.startswith("candidate run")]
    assert 1 <= len(runs) <= math.ceil(math.log2(8)) + 2, err  # eight packages differ (six and the pair)
    # nothing in the project changed; no candidate folder is left, the stale one included
    assert (root / "holotype.lock").read_bytes() == lock_before
    assert (root / "results" / "turbidity.json").read_bytes() == output_after_replay
    assert not stale.exists() and not any(overlay_root().iterdir())


@pytest.mark.slow
def test_two_packages_that_move_a_number_only_together_are_named_as_a_pair(lakes: dict[str, object]) -> None:
    root = lakes["pair"]
    assert isinstance(root, Path)
    code, doc, _ = pinpoint(root, lakes["wheels"])
    [cause] = [f for f in doc["findings"] if f["kind"] == "pinpoint.cause"]
    assert code == 1 and cause["subject"] == "lake-tool-pair-a + lake-tool-pair-b"
    assert "only together" in cause["message"]


@pytest.mark.slow
def test_each_failing_output_gets_its_own_cause_and_the_runs_are_shared(lakes: dict[str, object]) -> None:
    root = lakes["two"]
    assert isinstance(root, Path)
    code, doc, err = pinpoint(root, lakes["wheels"])
    causes = {f["message"].split(":")[0]: f["subject"] for f in doc["findings"] if f["kind"] == "pinpoint.cause"}
    assert code == 1 and causes == {"results/turbidity.json": CULPRIT,
                                    "results/clarity.json": "lake-tool-pair-a + lake-tool-pair-b"}, doc
    runs = [line for line in err.splitlines() if line.startswith("candidate run")]
    assert len(runs) < 2 * 8, err  # far fewer than two separate searches of eight differences would need


@pytest.mark.slow
def test_a_nondeterministic_analysis_is_reported_as_such_with_no_culprit(lakes: dict[str, object]) -> None:
    root = lakes["noisy"]
    assert isinstance(root, Path)
    code, doc, _ = pinpoint(root, lakes["wheels"])
    kinds = {f["kind"] for f in doc["findings"]}
    assert code == 1 and "pinpoint.nondeterministic" in kinds and "pinpoint.cause" not in kinds
    assert "replay --twice" in json.dumps(doc)


def test_pinpoint_without_a_replay_is_one_line_and_exit_2(tmp_path: Path) -> None:
    write(tmp_path / "holotype.toml", 'data = ["data"]\nseed = 1\n')
    write(tmp_path / "data" / "x.csv", "x\n1\n")
    assert run_cli("record", "--no-run", "-C", tmp_path).code == 0
    result = run_cli("pinpoint", "-C", tmp_path)
    assert result.code == 2 and "run 'holotype replay' first" in result.err and "Traceback" not in result.err
    assert os.path.exists(tmp_path / "holotype.lock")


# ----------------------------------------------------------------------------- added, removed, variables

ADDED = ("import json, os\nvalue = 0.25\n"
         "try:\n    import lake_tool_new\n    value *= lake_tool_new.FACTOR\nexcept ImportError:\n    pass\n"
         "try:\n    import lake_tool_gone\n    value *= lake_tool_gone.FACTOR\nexcept ImportError:\n    pass\n"
         "os.makedirs('results', exist_ok=True)\njson.dump({'turbidity': value}, open('results/turbidity.json', 'w'))\n")
NAMESPACE = ("import json, os\nfrom lakens import core\nvalue = 0.25 * core.FACTOR\n"
             "try:\n    from lakens import extra\n    value *= extra.FACTOR\nexcept ImportError:\n    pass\n"
             "os.makedirs('results', exist_ok=True)\njson.dump({'turbidity': value}, open('results/turbidity.json', 'w'))\n")


def _project(root: Path, python: Path, script: str) -> Path:
    write(root / "data" / "secchi.csv", "site,depth\nnorth,2.5\n")
    (root / "run.py").write_text(script)
    write(root / "holotype.toml", f'python = "{python}"\ndata = ["data"]\nseed = 7\n\n'
          '[analyses.turbidity]\ncommand = "python run.py"\noutputs = ["results/turbidity.json"]\n')
    assert run_cli("record", "-C", root).code == 0
    return root


@pytest.fixture(scope="session")
def since(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    return built_once(tmp_path_factory, "pinpoint-since", _build_since)


def _build_since(base: Path) -> dict[str, Path]:
    """Packages removed and added after the record (no upgrades): lake-tool-gone removed and lake-tool-new
    added in one environment; in another, lakens-extra added beside lakens-core, parts of one namespace."""
    wheels = base / "wheels"
    build_wheel(wheels, "lake-tool-gone", "1.0", module_text="FACTOR = 1.0\n")
    build_wheel(wheels, "lake-tool-new", "1.0", module_text="FACTOR = 3.0\n")
    build_wheel(wheels, "lakens-core", "1.0", modules={"lakens/core.py": "FACTOR = 1.0\n"}, top_level="lakens")
    build_wheel(wheels, "lakens-extra", "1.0", modules={"lakens/extra.py": "FACTOR = 5.0\n"}, top_level="lakens")
    plain, spaced = make_venv(base / "plain", wheels), make_venv(base / "spaced", wheels)
    plain.install("lake-tool-gone==1.0")
    spaced.install("lakens-core==1.0")
    slow = ADDED + ("import sys, time\nif os.environ.get('LAKE_SLOW'):\n"
                    "    open(os.environ['LAKE_SLOW'], 'w').write(str(os.getpid()))\n    time.sleep(120)\n")
    projects = {"added": _project(base / "added", plain.python, ADDED),
                "slow": _project(base / "slow", plain.python, slow),
                "namespace": _project(base / "namespace", spaced.python, NAMESPACE)}
    plain.pip("uninstall", "-y", "lake-tool-gone")
    plain.install("lake-tool-new==1.0")
    spaced.install("lakens-extra==1.0")
    return {"wheels": wheels, **projects}


@pytest.mark.slow
def test_a_package_added_and_one_removed_since_the_record_are_both_varied(since: dict[str, Path]) -> None:
    code, doc, err = pinpoint(since["added"], since["wheels"])
    [cause] = [f for f in doc["findings"] if f["kind"] == "pinpoint.cause"]
    # the added package is taken away by composition (the removed one is put back the same way): said so
    assert code == 1 and cause["subject"] == "lake-tool-new", doc
    assert "lake-tool-new 1.0 added" in cause["message"] and "lake-tool-new absent" in cause["message"]
    assert "exactly as in the failing replay" in cause["message"] and "[candidates: composed]" in cause["message"]
    assert not [f for f in doc["findings"] if f["kind"] == "pinpoint.not_varied"]
    [searched] = [f for f in doc["findings"] if f["kind"] == "pinpoint.searched"]
    assert "0 built as full environments" in searched["message"] and "lake-tool-gone" not in cause["subject"]
    assert "composed" in err and not any(overlay_root().iterdir())


@pytest.mark.slow
def test_an_added_namespace_part_falls_back_to_a_full_environment_and_says_so(since: dict[str, Path]) -> None:
    code, doc, err = pinpoint(since["namespace"], since["wheels"])
    [cause] = [f for f in doc["findings"] if f["kind"] == "pinpoint.cause"]
    # taking lakens-extra away at import would take lakens-core's `lakens` too: composition cannot express it
    assert code == 1 and cause["subject"] == "lakens-extra", doc
    [searched] = [f for f in doc["findings"] if f["kind"] == "pinpoint.searched"]
    assert "full environment" in cause["message"] and "1 built as full environments" in searched["message"]
    assert "building a full candidate environment" in err and not any(overlay_root().iterdir())


def test_a_numerics_variable_set_since_the_record_is_named(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import sys

    root = _project(tmp_path / "cbwr", Path(sys.executable),
                    "import json, os\nos.makedirs('results', exist_ok=True)\n"  # a stand-in for a library honouring it
                    "value = 0.1 + (1e-3 if os.environ.get('MKL_CBWR') else 0.0)\n"
                    "json.dump({'turbidity': value}, open('results/turbidity.json', 'w'))\n")
    monkeypatch.setenv("MKL_CBWR", "AVX2")
    code, doc, _ = pinpoint(root, tmp_path / "no-wheels")
    [cause] = [f for f in doc["findings"] if f["kind"] == "pinpoint.cause"]
    assert code == 1 and cause["subject"] == "MKL_CBWR" and cause["area"] == "environment", doc
    assert "MKL_CBWR unset → 'AVX2'" in cause["message"] and "all outputs reproduce" in cause["message"]


def _wait_for(path: Path, words: str, proc: subprocess.Popen[bytes]) -> None:
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if path.is_file() and words in path.read_text():
            return
        time.sleep(0.05)
    raise AssertionError(f"{words!r} never appeared: {path.read_text() if path.is_file() else ''}")


@pytest.mark.slow
def test_an_interrupted_search_leaves_the_project_as_it_was_and_no_candidate_behind(
        since: dict[str, Path], tmp_path: Path) -> None:
    import signal
    import sys

    from holotype.run.overlays import remove_stale_sessions

    root = since["slow"]
    assert run_cli("replay", "-C", root).code == 1
    kept = {p: p.read_bytes() for p in root.rglob("*") if p.is_file() and ".holotype" not in p.parts}
    for sig in (signal.SIGINT, signal.SIGKILL):
        pid_file, err = tmp_path / f"analysis-{sig}.pid", tmp_path / f"err-{sig}.txt"
        with err.open("wb") as sink:
            proc = subprocess.Popen([sys.executable, "-m", "holotype", "pinpoint", "-C", str(root), "--no-index",
                                     "--find-links", str(since["wheels"])], stdout=subprocess.DEVNULL, stderr=sink,
                                    env={**os.environ, "LAKE_SLOW": str(pid_file)})
            _wait_for(err, "candidate run 1", proc)
            while not pid_file.is_file() or not pid_file.read_text():
                time.sleep(0.05)  # the candidate has written its output and now sleeps
            proc.send_signal(sig)
            proc.wait(timeout=60)
        if sig == signal.SIGINT:  # Ctrl-C: holotype stops the analysis, puts the outputs back, cleans up
            assert proc.returncode == 2 and "interrupted" in err.read_text()
            assert not any(overlay_root().iterdir())
        else:  # killed outright: the next run finds the session, puts the outputs back, removes it
            os.kill(int(pid_file.read_text()), signal.SIGKILL)
            assert any(overlay_root().iterdir())
            assert remove_stale_sessions(root) == 1 and not any(overlay_root().iterdir())
        now = {p: p.read_bytes() for p in root.rglob("*") if p.is_file() and ".holotype" not in p.parts}
        assert now == kept, sig


def test_the_live_display_shows_runs_done_and_the_most_left() -> None:
    import io

    from rich.console import Console

    from holotype.render.progress import SearchBar

    sink = io.StringIO()
    bar = SearchBar(Console(file=sink, force_terminal=True, width=160))
    bar.run(1, 31, "4 of 8 differences applied (composed)")
    bar.say("building a full candidate environment in /tmp/x")
    bar.run(2, 30, "2 of 8 differences applied (composed)")
    bar.progress.refresh()  # type: ignore[union-attr]
    bar.close()
    shown = sink.getvalue()
    assert "1 done, at most 30 left" in shown and "2 of 8 differences applied" in shown
    assert "building a full candidate environment" in shown


def test_a_data_edit_is_listed_not_varied_and_nothing_is_blamed(tmp_path: Path) -> None:
    import sys

    root = _project(tmp_path / "edited", Path(sys.executable),
                    "import json, os\nos.makedirs('results', exist_ok=True)\n"
                    "depth = float(open('data/secchi.csv').read().split()[-1].split(',')[1])\n"
                    "json.dump({'turbidity': 1 / depth}, open('results/turbidity.json', 'w'))\n")
    (root / "data" / "secchi.csv").write_text("site,depth\nnorth,2.6\n")  # a hand edit after the record
    code, doc, _ = pinpoint(root, tmp_path / "no-wheels")
    [edit] = [f for f in doc["findings"] if f["kind"] == "pinpoint.not_varied"]
    assert edit["subject"] == "data/secchi.csv" and "not varied" in edit["message"]
    assert "cannot be put back" in edit["message"]
    assert code == 1 and not [f for f in doc["findings"] if f["kind"] == "pinpoint.cause"]
    assert [f["kind"] for f in doc["findings"] if f["severity"] == "fail"] == ["pinpoint.unexplained"]


def test_a_package_recorded_from_git_is_put_back_from_its_commit(monkeypatch: pytest.MonkeyPatch) -> None:
    import sys

    from holotype.records import Origin, PackageRecord
    from holotype.run.overlays import Overlays
    from holotype.standards.installer import Installer, InstallerOptions
    from holotype.standards.requirements import requirement_line

    asked: list[tuple[str, ...]] = []
    monkeypatch.setattr(Installer, "run", lambda self, what, *args, **kw: asked.append(args) or "")
    pkg = PackageRecord("lake-tool-git", "0.3.dev1", Origin("vcs", "https://example.org/lake-tool.git", vcs="git",
                                                             commit="0123456789abcdef0123456789abcdef01234567"))
    overlays = Overlays(sys.executable, InstallerOptions(), {pkg.name: requirement_line(pkg)})
    try:
        overlays.install(pkg.name, pkg.version)
        overlays.install("lake-tool-4", "1.0")
    finally:
        overlays.close(False)
    assert asked[0][-1] == "lake-tool-git @ git+https://example.org/lake-tool.git@0123456789abcdef0123456789abcdef01234567"
    assert asked[1][-1] == "lake-tool-4==1.0"


def test_only_a_candidate_takes_packages_away(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import sys

    from holotype.config import load_config
    from holotype.run.plan import make_plan

    write(tmp_path / "holotype.toml", '[analyses.a]\ncommand = "python a.py"\noutputs = ["out.json"]\n')
    monkeypatch.setenv("HOLOTYPE_HIDE_MODULES", "json")  # left over in the user's shell, say
    monkeypatch.setenv("HOLOTYPE_HIDE_DISTS", "numpy")
    config = load_config(tmp_path)
    [step] = make_plan(config, sys.executable, config.select(["a"]), 1).steps
    assert "HOLOTYPE_HIDE_MODULES" not in step.env and "HOLOTYPE_HIDE_DISTS" not in step.env
