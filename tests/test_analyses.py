"""Analyses, seeds and baselines: record runs them, replay proves they still reproduce."""

from __future__ import annotations

import gzip
import hashlib
import json
import random
import sys
from pathlib import Path

import numpy as np
import pytest

from conftest import run_cli, write
from holotype import seeds
from holotype.lockfile import read_lock
from holotype.store import BaselineStore

SCRIPT = """\
import csv, json, os, sys
import numpy as np
seed = int(os.environ["HOLOTYPE_SEED"])
rng = np.random.default_rng(seed)
scale = float(os.environ.get("NOISE", "0"))
values = [float(r["depth"]) for r in csv.DictReader(open("data/lakes.csv"))]
mean = sum(values) / len(values) * (1 + scale)
os.makedirs("results", exist_ok=True)
with open("results/summary.csv", "w") as fh:
    fh.write("stat,value\\n")
    fh.write(f"mean,{mean!r}\\n")
    fh.write(f"draw,{rng.random()!r}\\n")
json.dump({"seed": seed, "perm": {"p_value": float(rng.random())}}, open("results/test.json", "w"))
print("done", mean)
"""


@pytest.fixture
def project(tmp_path: Path) -> Path:
    root = tmp_path / "survey"
    write(root / "data" / "lakes.csv", "lake,depth\nA,1.5\nB,2.5\nC,4.0\n")
    write(root / "analysis" / "stats.py", SCRIPT)
    write(root / "holotype.toml", f"""\
        python = "{sys.executable}"
        data = ["data"]
        seed = 20261201
        threads = 1

        [analyses.stats]
        command = "python analysis/stats.py"
        outputs = ["results/summary.csv", "results/test.json"]
        inputs = ["data/lakes.csv"]
        timeout = 60
        """)
    result = run_cli("record", "-C", root)
    assert result.code == 0, result.out + result.err
    return root


def replay(root: Path, *args: str) -> tuple[int, list[dict]]:
    result = run_cli("replay", "-C", root, "--format", "json", *args)
    assert result.code in (0, 1), result.err
    return result.code, json.loads(result.out)["findings"]


# ----------------------------------------------------------------------------- seeds


def test_seed_derivation_matches_hashlib_directly() -> None:
    # interface: first 4 bytes, big-endian, of SHA-256 of "<project seed>/<analysis name>"
    expected = int.from_bytes(hashlib.sha256(b"20261201/summary").digest()[:4], "big")
    assert seeds.derive_seed(20261201, "summary") == expected
    assert 0 <= seeds.derive_seed(0, "x") < 2**32


def test_generators_reached_through_holotype_seeds_are_the_reference_ones(monkeypatch: pytest.MonkeyPatch) -> None:
    # Reference values, from memory of CPython's Mersenne Twister and NumPy's PCG64 (verified here):
    # random.seed(42); random.random() == 0.6394267984578837; default_rng(42).random() == 0.7739560485559633
    monkeypatch.setenv("HOLOTYPE_SEED", "42")
    random.seed(seeds.seed())
    assert random.random() == 0.6394267984578837
    assert seeds.rng().random() == 0.7739560485559633


def test_seeds_outside_holotype_read_the_config(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    for var in ("HOLOTYPE_SEED", "HOLOTYPE_PROJECT_SEED", "HOLOTYPE_ANALYSIS"):
        monkeypatch.delenv(var, raising=False)
    write(tmp_path / "holotype.toml", "seed = 77\n")
    (tmp_path / "analysis").mkdir()
    monkeypatch.chdir(tmp_path / "analysis")
    assert seeds.project_seed() == 77
    assert seeds.seed("summary") == seeds.derive_seed(77, "summary")


def test_analysis_process_sees_its_seeds(project: Path) -> None:
    lock = read_lock(project / "holotype.lock")
    assert lock.project_seed == 20261201
    assert lock.analyses["stats"].seed == seeds.derive_seed(20261201, "stats")
    written = json.loads((project / "results" / "test.json").read_text())
    assert written["seed"] == seeds.derive_seed(20261201, "stats")


# ----------------------------------------------------------------------------- record and replay


def test_record_stores_compressed_verified_baselines(project: Path) -> None:
    lock = read_lock(project / "holotype.lock")
    out = lock.analyses["stats"].outputs["results/summary.csv"]
    store = BaselineStore(project)
    assert gzip.decompress(store.path_for(out.sha256).read_bytes()) == (project / "results/summary.csv").read_bytes()
    assert out.tolerance == {"atol": 1e-12, "rtol": 1e-9}
    assert (project / ".holotype" / "logs" / "stats.log").read_text().count("done") == 1


def test_replay_clean(project: Path) -> None:
    code, findings = replay(project)
    assert code == 0
    assert [f["message"] for f in findings if f["area"] == "output"] == ["identical bytes"] * 2


def test_change_inside_tolerance_passes_outside_fails_with_figures(project: Path,
                                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("NOISE", "1e-12")
    code, findings = replay(project)
    summary = [f for f in findings if f["subject"] == "results/summary.csv"][0]
    assert code == 0 and summary["kind"] == "output.match" and summary["max_rel_err"] > 0
    monkeypatch.setenv("NOISE", "1e-3")
    code, findings = replay(project)
    summary = [f for f in findings if f["subject"] == "results/summary.csv"][0]
    assert code == 1 and summary["severity"] == "fail"
    assert summary["worst"] == "row 1, column value" and summary["mismatches"] == 1
    assert abs(summary["max_rel_err"] - 1e-3) < 1e-9
    assert summary["expected"] == repr(8.0 / 3)


def test_twice_flags_a_script_that_draws_from_urandom(project: Path) -> None:
    write(project / "analysis" / "stats.py", """\
        import os, json
        os.makedirs("results", exist_ok=True)
        open("results/summary.csv", "w").write("stat,value\\nmean,%r\\n" % (int.from_bytes(os.urandom(4), "big") / 2**32))
        json.dump({}, open("results/test.json", "w"))
        """)
    code, findings = replay(project, "--twice")
    nondet = [f for f in findings if f["kind"] == "analysis.nondeterministic"]
    assert code == 1 and len(nondet) == 1
    assert "nondeterministic" in nondet[0]["message"] and "results/summary.csv" in nondet[0]["message"]
    assert "row 1, column value" in nondet[0]["message"] and "unseeded" in nondet[0]["message"]


def test_crash_and_timeout_are_findings_with_the_error_text(project: Path) -> None:
    write(project / "analysis" / "stats.py", "import sys\nprint('reading lakes')\nsys.exit('depth column is empty')\n")
    code, findings = replay(project)
    [failed] = [f for f in findings if f["kind"] == "analysis.failed"]
    assert code == 1 and "exited with code 1" in failed["message"] and "depth column is empty" in failed["message"]
    write(project / "analysis" / "stats.py", "import time\nprint('thinking', flush=True)\ntime.sleep(30)\n")
    text = (project / "holotype.toml").read_text().replace("timeout = 60", "timeout = 0.5")
    (project / "holotype.toml").write_text(text)
    code, findings = replay(project)
    [failed] = [f for f in findings if f["kind"] == "analysis.failed"]
    assert code == 1 and "timed out after 0.5s" in failed["message"] and "thinking" in failed["message"]


def test_missing_output_is_a_finding(project: Path) -> None:
    write(project / "analysis" / "stats.py", "print('forgot to write')\n")
    code, findings = replay(project)
    [failed] = [f for f in findings if f["kind"] == "analysis.failed"]
    assert code == 1 and "did not write results/summary.csv" in failed["message"]


def test_failed_record_writes_nothing_new(project: Path) -> None:
    before = (project / "holotype.lock").read_bytes()
    write(project / "analysis" / "stats.py", "raise SystemExit(3)\n")
    result = run_cli("record", "-C", project)
    assert result.code == 1 and "nothing written" in result.out
    assert (project / "holotype.lock").read_bytes() == before


def test_adopt_requires_and_logs_a_reason(project: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("NOISE", "1e-3")
    assert replay(project)[0] == 1
    refused = run_cli("adopt", "-C", project)
    assert refused.code == 2 and "--reason" in refused.err
    assert run_cli("adopt", "stats", "-C", project, "--reason", "corrected depth units").code == 0
    lock = read_lock(project / "holotype.lock")
    [entry] = [h for h in lock.history if not h.reason.startswith("holotype record")]  # record logs itself too
    assert entry.reason == "corrected depth units" and entry.analyses == ("stats",) and entry.who
    assert [c[0] for c in entry.changes] == ["results/summary.csv"]
    assert replay(project)[0] == 0  # the new numbers are the baseline now


def test_corrupted_baseline_is_detected(project: Path) -> None:
    lock = read_lock(project / "holotype.lock")
    digest = lock.analyses["stats"].outputs["results/summary.csv"].sha256
    path = BaselineStore(project).path_for(digest)
    path.write_bytes(gzip.compress(b"stat,value\nmean,0\n"))
    code, findings = replay(project)
    [bad] = [f for f in findings if f["kind"] == "output.baseline"]
    assert code == 1 and "does not match its SHA-256" in bad["message"]
    path.write_bytes(b"not gzip at all")
    code, findings = replay(project)
    assert code == 1 and "does not decompress" in [f for f in findings if f["kind"] == "output.baseline"][0]["message"]


def test_unknown_analysis_name_is_exit_2(project: Path) -> None:
    result = run_cli("replay", "nope", "-C", project)
    assert result.code == 2 and "no analysis named 'nope'" in result.err


def test_dry_run_shows_command_and_environment(project: Path) -> None:
    result = run_cli("replay", "--dry-run", "-C", project, "--format", "json")
    [plan] = json.loads(result.out)["findings"]
    assert "analysis/stats.py" in plan["message"] and f"HOLOTYPE_SEED={seeds.derive_seed(20261201, 'stats')}" in \
        plan["message"] and "OMP_NUM_THREADS=1" in plan["message"]


def test_changed_seed_moves_seeded_outputs(project: Path) -> None:
    text = (project / "holotype.toml").read_text().replace("seed = 20261201", "seed = 5")
    (project / "holotype.toml").write_text(text)
    code, findings = replay(project)
    kinds = {f["kind"] for f in findings if f["severity"] == "fail"}
    assert code == 1 and {"seed.changed", "output.mismatch"} <= kinds


def test_dependency_order_and_cycles(tmp_path: Path) -> None:
    from holotype.config import Analysis, run_order
    from holotype.errors import ConfigError

    a = Analysis("report", "python r.py", ("out/r.txt",), ("out/s.csv",))
    b = Analysis("summary", "python s.py", ("out/s.csv",))
    assert [x.name for x in run_order((a, b))] == ["summary", "report"]
    c = Analysis("summary", "python s.py", ("out/s.csv",), ("out/r.txt",))
    with pytest.raises(ConfigError, match="cycle"):
        run_order((a, c))


# ----------------------------------------------------------------------------- seed_globals


GLOBAL_RNG_SCRIPT = """\
import random, os
import numpy as np
boot = np.random.choice(100, size=5)
shuffled = list(range(10)); random.shuffle(shuffled)
os.makedirs("results", exist_ok=True)
open("results/boot.csv", "w").write("i,v\\n" + "".join(f"{i},{v}\\n" for i, v in enumerate(list(boot) + shuffled)))
"""


@pytest.mark.parametrize("seed_globals", [True, False])
def test_seed_globals_makes_unseeded_global_generators_repeatable(tmp_path: Path, seed_globals: bool) -> None:
    root = tmp_path / "colleague"
    write(root / "boot.py", GLOBAL_RNG_SCRIPT)
    write(root / "holotype.toml", f"""\
        python = "{sys.executable}"
        seed = 3
        seed_globals = {str(seed_globals).lower()}

        [analyses.boot]
        command = "python boot.py"
        outputs = ["results/boot.csv"]
        """)
    assert run_cli("record", "-C", root).code == 0
    code, findings = replay(root, "--twice")
    nondet = [f for f in findings if f["kind"] == "analysis.nondeterministic"]
    if seed_globals:
        assert code == 0 and not nondet
    else:
        assert code == 1 and nondet


def test_seed_globals_chains_an_existing_sitecustomize(tmp_path: Path) -> None:
    import os
    import subprocess

    from holotype.run.plan import hook_folder

    write(tmp_path / "site" / "sitecustomize.py", "import builtins\nbuiltins.LAB_SITE = 'loaded'\n")
    env = {**os.environ, "HOLOTYPE_SEED": "42",
           "PYTHONPATH": hook_folder() + os.pathsep + str(tmp_path / "site")}
    out = subprocess.run([sys.executable, "-c", "import random, sys; print(random.random(), LAB_SITE, "
                          "'numpy' in sys.modules)"], env=env, capture_output=True, text=True)
    assert out.stdout.split() == ["0.6394267984578837", "loaded", "False"], out.stderr
    out = subprocess.run([sys.executable, "-c", "import numpy as np; print(np.random.random())"], env=env,
                         capture_output=True, text=True)
    np.random.seed(42)
    assert float(out.stdout) == np.random.random()


def test_check_notices_missing_or_damaged_baselines_without_running(project: Path) -> None:
    lock = read_lock(project / "holotype.lock")
    digest = lock.analyses["stats"].outputs["results/test.json"].sha256
    path = BaselineStore(project).path_for(digest)
    original = path.read_bytes()
    path.write_bytes(gzip.compress(b"{}"))
    assert run_cli("check", "-C", project).code == 0  # existence only, by default: cheap
    full = run_cli("check", "--full", "-C", project, "--format", "json")
    assert full.code == 1 and "does not match its SHA-256" in full.out
    path.unlink()
    missing = run_cli("check", "-C", project, "--format", "json")
    assert missing.code == 1 and "was .holotype/ committed?" in missing.out
    path.write_bytes(original)
    assert run_cli("check", "--full", "-C", project).code == 0
