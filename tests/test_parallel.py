"""Analyses in parallel (--jobs) and on a Dask cluster: same results as one after another."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from conftest import run_cli, write

ANALYSIS = """\
import os, sys, time
name = sys.argv[1]
os.makedirs("out", exist_ok=True)
os.makedirs("stamps", exist_ok=True)
start = time.time()
for path in sys.argv[2:]:
    assert open(path).read(), path  # an input written by an earlier analysis
open(f"stamps/{name}.pid", "w").write(str(os.getpid()))
time.sleep(float(os.environ.get("SLEEP", "0.3")))
if os.environ.get("FAIL") == name:
    sys.exit(f"{name} failed on purpose")
if os.environ.get("HANG") == name:
    child = os.fork()
    if child == 0:
        time.sleep(60)
        os._exit(0)
    open(f"stamps/{name}.child", "w").write(str(child))
    time.sleep(60)
open(f"out/{name}.txt", "w").write(f"{name} seed {os.environ['HOLOTYPE_SEED']}\\n")
open(f"stamps/{name}.time", "w").write(f"{start} {time.time()}")
"""

# two chains (a1 -> a2, b1 -> b2) and four independent analyses
DEPENDS = {"a1": [], "a2": ["a1"], "b1": [], "b2": ["b1"], "c1": [], "c2": [], "c3": [], "c4": []}


def make_project(root: Path, *, timeout: float = 60) -> Path:
    write(root / "data" / "d.csv", "x\n1\n")
    write(root / "run.py", ANALYSIS)
    lines = [f'python = "{sys.executable}"', 'data = ["data"]', "seed = 77", "threads = 1", ""]
    for name, deps in DEPENDS.items():
        inputs = [f"out/{d}.txt" for d in deps]
        lines += [f"[analyses.{name}]", f'command = "python run.py {name} {" ".join(inputs)}"',
                  f'outputs = ["out/{name}.txt"]', f"inputs = {json.dumps(inputs)}", f"timeout = {timeout}", ""]
    write(root / "holotype.toml", "\n".join(lines))
    return root


def stable_findings(result_out: str) -> list[tuple[str, str, str, str]]:
    doc = json.loads(result_out)
    return [(f["kind"], f["subject"], f["severity"], f["message"] if f["kind"] != "analysis.ran" else "")
            for f in doc["findings"]]


def alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    try:  # a zombie is not running
        return "Z" not in Path(f"/proc/{pid}/stat").read_text().split(")")[-1].split()[0]
    except OSError:
        return True


def test_jobs_4_gives_the_same_lock_and_findings_as_jobs_1(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1764633600")
    one, four = make_project(tmp_path / "one"), make_project(tmp_path / "four")
    assert run_cli("record", "-C", one, "--jobs", "1").code == 0
    assert run_cli("record", "-C", four, "--jobs", "4").code == 0
    assert (one / "holotype.lock").read_bytes() == (four / "holotype.lock").read_bytes()
    serial = run_cli("replay", "-C", one, "--jobs", "1", "--format", "json")
    parallel = run_cli("replay", "-C", four, "--jobs", "4", "--format", "json")
    assert serial.code == parallel.code == 0
    assert stable_findings(serial.out) == stable_findings(parallel.out)
    # dependency order: each analysis started after the ones it reads from had finished
    times = {n: tuple(map(float, (four / "stamps" / f"{n}.time").read_text().split())) for n in DEPENDS}
    for name, deps in DEPENDS.items():
        for dep in deps:
            assert times[name][0] >= times[dep][1], (name, dep)
    # and the independent ones really ran side by side
    starts = sorted(times[n][0] for n in ("c1", "c2", "c3", "c4"))
    ends = sorted(times[n][1] for n in ("c1", "c2", "c3", "c4"))
    assert starts[1] < ends[0]


def test_a_failure_and_a_timeout_stop_only_themselves(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    root = make_project(tmp_path / "p", timeout=2)
    assert run_cli("record", "-C", root, "--jobs", "4").code == 0
    monkeypatch.setenv("FAIL", "c1")
    monkeypatch.setenv("HANG", "c2")
    result = run_cli("replay", "-C", root, "--jobs", "4", "--format", "json")
    findings = json.loads(result.out)["findings"]
    failed = {f["subject"]: f["message"] for f in findings if f["kind"] == "analysis.failed"}
    assert result.code == 1 and set(failed) == {"c1", "c2"}
    assert "failed on purpose" in failed["c1"] and "timed out after 2s" in failed["c2"]
    ran = {f["subject"] for f in findings if f["kind"] == "analysis.ran"}
    assert ran == set(DEPENDS) - {"c1", "c2"}
    child = int((root / "stamps" / "c2.child").read_text())
    deadline = time.monotonic() + 5
    while alive(child) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not alive(child)  # the timeout took the analysis' whole process group


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_interrupt_stops_every_child_and_keeps_the_old_lock(tmp_path: Path, sig: int) -> None:
    root = make_project(tmp_path / "p")
    assert run_cli("record", "-C", root, "--jobs", "4").code == 0
    before = (root / "holotype.lock").read_bytes()
    for pid in (root / "stamps").glob("*.pid"):
        pid.unlink()
    proc = subprocess.Popen([sys.executable, "-m", "holotype", "record", "-C", str(root), "--jobs", "4"],
                            env={**os.environ, "SLEEP": "30"}, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 30
    while len(list((root / "stamps").glob("*.pid"))) < 4 and time.monotonic() < deadline:
        time.sleep(0.05)
    pids = [int(p.read_text()) for p in (root / "stamps").glob("*.pid")]
    assert len(pids) == 4
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=30)
    assert proc.returncode == 2 and b"interrupted" in err and b"Traceback" not in err
    deadline = time.monotonic() + 5
    while any(alive(p) for p in pids) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not any(alive(p) for p in pids)
    assert (root / "holotype.lock").read_bytes() == before
    assert not list(root.rglob(".holotype-tmp-*"))


def test_an_analysis_writing_another_analysis_output_is_reported(tmp_path: Path) -> None:
    write(tmp_path / "data" / "d.csv", "x\n1\n")
    write(tmp_path / "a.py", "import os\nos.makedirs('out', exist_ok=True)\nopen('out/a.txt', 'w').write('a')\n")
    write(tmp_path / "b.py", "import os\nopen('out/b.txt', 'w').write('b')\nopen('out/a.txt', 'w').write('b was here')\n")
    write(tmp_path / "holotype.toml", f'python = "{sys.executable}"\ndata = ["data"]\nseed = 1\n'
                                      '[analyses.a]\ncommand = "python a.py"\noutputs = ["out/a.txt"]\n'
                                      '[analyses.b]\ncommand = "python b.py"\noutputs = ["out/b.txt"]\n'
                                      'inputs = ["out/a.txt"]\n')
    result = run_cli("record", "-C", tmp_path, "--jobs", "1", "--format", "json")
    [stray] = [f for f in json.loads(result.out)["findings"] if f["kind"] == "output.foreign_write"]
    assert result.code == 1 and stray["subject"] == "out/a.txt" and "'b' ran" in stray["message"]


# ----------------------------------------------------------------------------- Dask


@pytest.fixture(scope="session")
def dask_cluster() -> object:
    distributed = pytest.importorskip("distributed")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                       dashboard_address=None, silence_logs=40)
    try:
        yield cluster
    finally:
        cluster.close()


def test_replay_through_a_local_dask_cluster_matches_a_local_replay(tmp_path: Path, dask_cluster: object) -> None:
    root = make_project(tmp_path / "p")
    assert run_cli("record", "-C", root, "--jobs", "2").code == 0
    address = dask_cluster.scheduler_address  # type: ignore[attr-defined]
    local = run_cli("replay", "-C", root, "--jobs", "2", "--format", "json")
    remote = run_cli("replay", "-C", root, "--cluster", address, "--format", "json")
    assert local.code == remote.code == 0, remote.err
    assert stable_findings(local.out) == stable_findings(remote.out)
    # the config key does the same
    text = (root / "holotype.toml").read_text().replace("threads = 1", f'threads = 1\ncluster = "{address}"')
    (root / "holotype.toml").write_text(text)
    assert run_cli("replay", "-C", root, "--format", "json").code == 0


def test_a_worker_that_cannot_see_the_project_is_one_clear_line(tmp_path: Path, dask_cluster: object) -> None:
    from holotype.config import load_config
    from holotype.errors import HolotypeError
    from holotype.run.cluster import ClusterRunner, Expected, connect
    from holotype.run.plan import make_plan
    from holotype.store import ProjectStore

    root = make_project(tmp_path / "p")
    config = load_config(root)
    plan = make_plan(config, sys.executable, config.select(["c1"]), 77)
    runner = ClusterRunner(ProjectStore(root), connect(dask_cluster.scheduler_address),  # type: ignore[attr-defined]
                           "holotype.toml")
    honest = runner.expected()
    elsewhere = tmp_path / "not-shared"  # the task is started with a folder no worker has
    runner.expected = lambda: Expected(str(elsewhere), honest.digest_file, honest.digest)  # type: ignore[method-assign]
    try:
        with pytest.raises(HolotypeError) as caught:
            runner.run(plan)
    finally:
        runner.close()
    message = str(caught.value)
    assert "worker tcp://127.0.0.1:" in message and "does not see the project folder" in message
    assert str(elsewhere) in message and "\n" not in message


def test_cluster_option_without_the_extra_says_which_to_install(tmp_path: Path,
                                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    root = make_project(tmp_path / "p")
    assert run_cli("record", "-C", root, "--jobs", "2").code == 0
    monkeypatch.setitem(sys.modules, "distributed", None)  # as if the extra were not installed
    result = run_cli("replay", "-C", root, "--cluster", "tcp://127.0.0.1:1")
    assert result.code == 2 and "pip install 'holotype[cluster]'" in result.err
    assert len(result.err.strip().splitlines()) == 1
