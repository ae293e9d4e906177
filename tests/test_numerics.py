"""The numeric stack: what the analysis interpreter really loads, compared by check, used to explain a replay.

The interpreter running the tests has NumPy and SciPy installed from the package registry, so it serves as
the "real second interpreter": holotype inspects it in a subprocess, exactly as it would any other.

This machine pins OPENBLAS_CORETYPE (older OpenBLAS builds pick a wrong kernel on its CPU) and the
environment's rule is not to change it in tests; a changed variable or kernel is therefore simulated
in the recorded lock, which is what check compares against.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import make_venv, run_cli, write
from holotype.capture.numerics import capture_numerics, libraries_from_info, start_inspection
from holotype.lockfile import read_lock


def test_the_loaded_blas_matches_threadpoolctls_own_report() -> None:
    pytest.importorskip("numpy")
    pytest.importorskip("scipy")
    from holotype.capture.environment import capture_environment

    env = capture_environment(sys.executable, Path.cwd())
    stack = capture_numerics(sys.executable, env, threads=None)
    assert stack is not None and stack.inspection == "threadpoolctl"
    assert {"numpy", "scipy.linalg"} <= set(stack.imported)
    # the reference: threadpoolctl's threadpool_info() run in that interpreter by itself
    reference = subprocess.run([sys.executable, "-c", "import json, numpy, scipy.linalg\n"
                                "from threadpoolctl import threadpool_info\nprint(json.dumps(threadpool_info()))"],
                               capture_output=True, text=True, check=True)
    expected = libraries_from_info(json.loads(reference.stdout))
    assert expected, "threadpoolctl found no BLAS in an interpreter with NumPy"
    seen = {(lib.internal_api, lib.version, lib.architecture, lib.file, lib.bundled_by) for lib in stack.libraries}
    assert seen == {(lib.internal_api, lib.version, lib.architecture, lib.file, lib.bundled_by) for lib in expected}
    blas = [lib for lib in stack.libraries if lib.user_api == "blas"]
    assert blas and all(lib.internal_api and lib.version for lib in blas)
    assert any(lib.bundled_by == "numpy" for lib in blas)  # NumPy's wheel bundles its own
    assert stack.numpy_version == __import__("numpy").__version__
    assert stack.logical_cpus >= 1 and stack.cpu_model


def test_the_inspection_is_standard_library_only_on_the_oldest_python() -> None:
    from test_probe import oldest_python

    exe = oldest_python()
    run = start_inspection(exe, threads=1)
    doc = run.result()
    assert doc["numerics_format"] == 1 and doc["cpu"]["logical_cpus"] >= 1
    assert doc["variables"].get("OMP_NUM_THREADS") == "1"  # analyses' thread settings are applied


def test_without_numpy_the_stack_is_absent_not_an_error(tmp_path: Path, wheelhouse: Path) -> None:
    venv = make_venv(tmp_path / "venv", wheelhouse)  # a fresh environment: no NumPy in it
    root = tmp_path / "p"
    write(root / "data" / "a.csv", "x\n1\n")
    write(root / "holotype.toml", f'python = "{venv.python}"\ndata = ["data"]\nseed = 2\n')
    result = run_cli("record", "--no-run", "-C", root)
    assert result.code == 0, result.err
    assert read_lock(root / "holotype.lock").numerics is None
    assert "[numerics]" not in (root / "holotype.lock").read_text()
    assert run_cli("check", "-C", root).code == 0


SCRIPT = """\
import os, sys
{imports}
os.makedirs("out", exist_ok=True)
shift = float(os.environ.get("SHIFT", "0"))
open("out/r.csv", "w").write(f"v\\n{{1.5 + shift!r}}\\n")
"""


def numeric_project(root: Path, *, uses_numpy: bool) -> Path:
    pytest.importorskip("numpy")
    write(root / "data" / "a.csv", "x\n1\n")
    write(root / "run.py", SCRIPT.format(imports="import numpy\nnumpy.dot([1.0], [2.0])" if uses_numpy else ""))
    write(root / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 4\nthreads = 1\n'
                                  '[analyses.a]\ncommand = "python run.py"\noutputs = ["out/r.csv"]\n'
                                  'inputs = ["data/a.csv"]\n')
    assert run_cli("record", "-C", root).code == 0
    return root


def edit_lock(root: Path, edit: object) -> None:
    path = root / "holotype.lock"
    path.write_text(edit(path.read_text()))  # type: ignore[operator]


def test_the_record_notes_what_each_analysis_loaded(tmp_path: Path) -> None:
    with_numpy = read_lock(numeric_project(tmp_path / "n", uses_numpy=True) / "holotype.lock")
    without = read_lock(numeric_project(tmp_path / "p", uses_numpy=False) / "holotype.lock")
    assert "numpy" in with_numpy.analyses["a"].modules
    assert "openblas (numpy)" in with_numpy.analyses["a"].libraries
    assert without.analyses["a"].libraries == () and "numpy" not in without.analyses["a"].modules
    assert with_numpy.numerics is not None and without.numerics is not None  # the interpreter's stack either way


def test_check_reports_a_changed_numerics_variable_and_kernel(tmp_path: Path) -> None:
    root = numeric_project(tmp_path / "p", uses_numpy=True)
    lock = read_lock(root / "holotype.lock")
    assert lock.numerics is not None
    kernel = lock.numerics.libraries[0].architecture
    assert kernel
    # as recorded on a machine where OPENBLAS_CORETYPE=Prescott was set, and the kernel followed it
    edit_lock(root, lambda t: re.sub(r'(\[numerics\.variables\]\n)', r'\1OPENBLAS_CORETYPE = "Prescott"\n',
                                     t.replace('OPENBLAS_CORETYPE = "' + lock.numerics.variables.get(
                                         "OPENBLAS_CORETYPE", "") + '"\n', "") if "OPENBLAS_CORETYPE" in
                                     lock.numerics.variables else t, count=1)
              .replace(f'architecture = "{kernel}"', 'architecture = "Prescott"'))
    result = run_cli("check", "-C", root, "--format", "json")
    findings = json.loads(result.out)["findings"]
    variable = [f for f in findings if f["kind"] == "numeric.variable" and f["subject"] == "OPENBLAS_CORETYPE"]
    kernels = [f for f in findings if f["kind"] == "numeric.kernel"]
    assert variable and variable[0]["severity"] == "warn" and "Prescott" in variable[0]["message"]
    assert kernels and kernels[0]["severity"] == "info" and f"{kernel} picked now" in kernels[0]["message"]
    assert result.code == 0  # warn and info by default; [policy] can make them fail
    strict = run_cli("check", "-C", root, "--strict")
    assert strict.code == 1


def _moved(root: Path, monkeypatch: pytest.MonkeyPatch) -> list[str]:
    monkeypatch.setenv("SHIFT", "0.25")
    result = run_cli("replay", "-C", root, "--format", "json")
    [moved] = [f for f in json.loads(result.out)["findings"] if f["kind"] == "output.mismatch"]
    return list(moved.get("candidates", []))


def test_a_library_the_analysis_never_loaded_is_not_blamed(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    for uses_numpy in (False, True):
        monkeypatch.delenv("SHIFT", raising=False)
        root = numeric_project(tmp_path / f"p{uses_numpy}", uses_numpy=uses_numpy)
        # the recorded numpy OpenBLAS was another version
        edit_lock(root, lambda t: re.sub(r'(bundled_by = "numpy"\nversion = )"[^"]*"', r'\1"0.3.1"', t))
        candidates = _moved(root, monkeypatch)
        blamed = [c for c in candidates if c.startswith("native library openblas (numpy)")]
        assert bool(blamed) is uses_numpy, candidates


def test_a_used_package_that_changed_version_ranks_first_and_data_before_it(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    root = numeric_project(tmp_path / "p", uses_numpy=True)
    actual = read_lock(root / "holotype.lock").packages["numpy"].version
    edit_lock(root, lambda t: t.replace(f'[packages.numpy]\nversion = "{actual}"', '[packages.numpy]\nversion = "1.0.0"'))
    candidates = _moved(root, monkeypatch)
    assert candidates[0] == f"package numpy 1.0.0 → {actual} (imported by the analysis)", candidates
    (root / "data" / "a.csv").write_text("x\n2\n")
    candidates = _moved(root, monkeypatch)
    assert candidates[0].startswith("data data/a.csv:") and candidates[1].startswith("package numpy"), candidates
    text = run_cli("replay", "-C", root).out
    assert "a ranking of candidates, not proof" in text
    report = run_cli("report", "-C", root).out
    assert "## Numerical environment" in report and "What may have moved" in report


def test_a_replay_that_reproduces_exactly_captures_nothing_more(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import holotype.commands.replay as replay

    root = numeric_project(tmp_path / "p", uses_numpy=False)
    called: list[object] = []
    monkeypatch.setattr(replay, "capture_project", lambda *a, **k: called.append(a))
    assert run_cli("replay", "-C", root).code == 0 and not called


def test_check_reuses_the_inspection_while_nothing_that_decides_it_changed(tmp_path: Path) -> None:
    from holotype.capture.digest_cache import DigestCache
    from holotype.capture.environment import capture_environment
    from holotype.capture.numerics import inspection_key

    pytest.importorskip("numpy")
    env = capture_environment(sys.executable, Path.cwd())
    cache = DigestCache(tmp_path / "c.sqlite3")
    try:
        first = capture_numerics(sys.executable, env, threads=1, cache=cache)
        assert cache.fact(inspection_key(sys.executable, env, 1)) is not None
        assert capture_numerics(sys.executable, env, threads=1, cache=cache) == first
        assert cache.fact(inspection_key(sys.executable, env, 2)) is None  # other thread settings: inspect again
    finally:
        cache.close()


def test_a_record_whose_workers_digest_the_data_inspects_only_when_the_cache_cannot_answer(tmp_path: Path) -> None:
    from holotype.capture.digest_cache import DigestCache
    from holotype.capture.environment import capture_environment
    from holotype.capture.numerics import inspection_key, start_unless_known

    pytest.importorskip("numpy")
    env = capture_environment(sys.executable, Path.cwd())
    cache = DigestCache(tmp_path / "c.sqlite3")
    try:
        run = start_unless_known(sys.executable, env, 1, cache)
        assert run is not None  # nothing remembered: inspected now
        run.stop()
        cache.remember(inspection_key(sys.executable, env, 1), "{}")
        assert start_unless_known(sys.executable, env, 1, cache) is None
        other = start_unless_known(sys.executable, env, 2, cache)
        assert other is not None  # other thread settings: not the same answer
        other.stop()
    finally:
        cache.close()
