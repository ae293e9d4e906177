"""Data and code fingerprints: exact digests, the stat cache, and every kind of change."""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pytest

from conftest import run_cli, write
from holotype.capture.digest_cache import DigestCache
from holotype.capture.fingerprints import fingerprint_files, sha256_file
from holotype.capture.walk import ProjectWalker

# FIPS 180-4 / NIST "Example Algorithm" vectors for SHA-256 (the published example messages).
NIST_VECTORS = [
    (b"abc", "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"),
    (b"", "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"),
    (b"abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq",
     "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"),
]


@pytest.mark.parametrize(("message", "digest"), NIST_VECTORS)
def test_fips_180_4_vectors_through_the_file_hasher(tmp_path: Path, message: bytes, digest: str) -> None:
    path = tmp_path / "m.bin"
    path.write_bytes(message)
    assert sha256_file(path) == digest
    result = fingerprint_files(ProjectWalker(tmp_path).collect(("m.bin",))[0])
    assert result.records["m.bin"].sha256 == digest


def test_million_a_vector_spans_many_chunks(tmp_path: Path) -> None:
    # FIPS 180-4 example: one million repetitions of "a"
    path = tmp_path / "a.bin"
    path.write_bytes(b"a" * 1_000_000)
    assert sha256_file(path) == "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0"


@pytest.fixture
def project(tmp_path: Path) -> Path:
    root = tmp_path / "proj"
    write(root / "holotype.toml", 'data = ["data"]\nexclude = ["**/*.tmp"]\nseed = 1\n')
    write(root / "data" / "lakes.csv", "lake,depth\nA,1.5\nB,2.5\n")
    write(root / "data" / "sub dir" / "ñame é.csv", "x\n1\n")
    (root / "data" / "empty.csv").write_bytes(b"")
    write(root / "data" / "scratch.tmp", "ignored")
    write(root / "analysis" / "run.py", "import json\n")
    assert run_cli("record", "--no-run", "-C", root).code == 0
    return root


def check(root: Path, *extra: str) -> tuple[int, list[dict]]:
    result = run_cli("check", "-C", root, "--format", "json", *extra)
    assert result.code in (0, 1), result.err
    doc = json.loads(result.out)
    return result.code, [f for f in doc["findings"] if f["area"] in ("data", "code")]


def test_lock_lists_relative_sorted_paths_and_skips_excludes(project: Path) -> None:
    text = (project / "holotype.lock").read_text()
    assert '[data."data/empty.csv"]' in text and '[data."data/sub dir/ñame é.csv"]' in text
    assert "scratch.tmp" not in text and str(project) not in text
    assert '[code."analysis/run.py"]' in text
    assert check(project) == (0, [])


def test_changed_byte_with_restored_mtime_is_caught(project: Path) -> None:
    path = project / "data" / "lakes.csv"
    assert check(project)[0] == 0  # fills the cache
    st = path.stat()
    path.write_text("lake,depth\nA,1.5\nB,2.6\n")  # same size, one byte different
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))  # the mtime put back by hand; ctime still moves
    code, findings = check(project)
    assert code == 1
    assert findings[0]["subject"] == "data/lakes.csv" and findings[0]["severity"] == "fail"
    assert "same size" in findings[0]["message"]


def test_deleted_added_renamed_and_type_changed(project: Path) -> None:
    data = project / "data"
    (data / "empty.csv").unlink()
    write(data / "new.csv", "n\n1\n")
    (data / "lakes.csv").rename(data / "lakes_v1.csv")
    os.symlink("lakes_v1.csv", data / "link.csv")
    shutil.rmtree(data / "sub dir")
    (data / "sub dir").write_text("now a file")
    code, findings = check(project)
    kinds = {(f["subject"], f["kind"]) for f in findings}
    assert code == 1
    assert ("data/empty.csv", "data.missing") in kinds
    assert ("data/new.csv", "data.added") in kinds
    assert ("data/lakes.csv", "data.renamed") in kinds and not any(s == "data/lakes_v1.csv" for s, _ in kinds)
    assert ("data/link.csv", "data.added") in kinds
    assert ("data/sub dir/ñame é.csv", "data.missing") in kinds
    severities = {f["kind"]: f["severity"] for f in findings}
    assert severities["data.added"] == "warn" and severities["data.renamed"] == "fail"


def test_file_turned_into_a_folder_or_link(project: Path) -> None:
    data = project / "data"
    (data / "empty.csv").unlink()
    write(data / "empty.csv" / "inner.csv", "x\n")
    (data / "lakes.csv").unlink()
    os.symlink("empty.csv/inner.csv", data / "lakes.csv")
    code, findings = check(project)
    messages = {f["subject"]: f["message"] for f in findings}
    assert code == 1
    assert "now a folder" in messages["data/empty.csv"]
    assert "now a symbolic link" in messages["data/lakes.csv"]


def test_unreadable_file_is_a_finding(project: Path) -> None:
    if os.geteuid() == 0:
        pytest.skip("running as root: chmod 000 does not stop root from reading")
    path = project / "data" / "lakes.csv"
    path.chmod(0)
    try:
        code, findings = check(project, "--full")
    finally:
        path.chmod(0o644)
    assert code == 1 and any(f["kind"] == "data.unreadable" for f in findings)


def test_read_error_is_a_finding_with_the_os_error(project: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the same path as chmod 000, reachable as root too: the OS refuses the read
    import holotype.capture.fingerprints as fp

    real = fp.sha256_file

    def refuse(path: str, counter: object = None) -> str:
        if path.endswith("lakes.csv"):
            raise PermissionError(13, "Permission denied", path)
        return real(path, counter)  # type: ignore[arg-type]

    monkeypatch.setattr(fp, "sha256_file", refuse)
    code, findings = check(project, "--full")
    [bad] = [f for f in findings if f["kind"] == "data.unreadable"]
    assert code == 1 and bad["subject"] == "data/lakes.csv" and "Permission denied" in bad["message"]


def test_code_change_warns(project: Path) -> None:
    write(project / "analysis" / "run.py", "import json\nprint(1)\n")
    code, findings = check(project)
    assert code == 0 and findings[0]["kind"] == "code.changed" and findings[0]["severity"] == "warn"


def test_cache_second_pass_reads_no_bytes_and_full_rereads(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import holotype.capture.digest_cache as dc

    monkeypatch.setattr(dc, "RACY_SECONDS", 0.0)  # these files were written a moment ago
    for i in range(20):
        write(tmp_path / "d" / f"f{i}.csv", f"x\n{i}\n")
    files, _ = ProjectWalker(tmp_path).collect(("d",))
    cache = DigestCache(tmp_path / "c.sqlite3")
    first = fingerprint_files(files, cache=cache)
    assert first.files_hashed == 20 and first.cache_hits == 0
    second = fingerprint_files(files, cache=cache)
    assert second.files_hashed == 0 and second.bytes_hashed == 0 and second.cache_hits == 20
    assert second.records == first.records
    full = fingerprint_files(files, cache=None)
    assert full.files_hashed == 20 and full.records == first.records


def test_files_changed_moments_ago_are_not_trusted_from_the_cache(tmp_path: Path) -> None:
    # within the racy window a later write could share the same timestamps, so nothing is cached yet
    write(tmp_path / "d" / "a.csv", "x\n")
    files, _ = ProjectWalker(tmp_path).collect(("d",))
    cache = DigestCache(tmp_path / "c.sqlite3")
    fingerprint_files(files, cache=cache)
    assert fingerprint_files(files, cache=cache).files_hashed == 1


def test_corrupt_cache_is_rebuilt(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import hashlib

    import holotype.capture.digest_cache as dc

    monkeypatch.setattr(dc, "RACY_SECONDS", 0.0)
    path = tmp_path / "c.sqlite3"
    DigestCache(path).close()  # a cache holotype wrote (its header names holotype) ...
    header = path.read_bytes()[:100]
    path.write_bytes(header + b"this is not a database" * 100)  # ... damaged past the header
    write(tmp_path / "d" / "a.csv", "x\n")
    files, _ = ProjectWalker(tmp_path).collect(("d",))
    result = fingerprint_files(files, cache=DigestCache(path))
    assert result.records["d/a.csv"].sha256 == hashlib.sha256(b"x\n").hexdigest()
    assert fingerprint_files(files, cache=DigestCache(path)).cache_hits == 1  # the rebuilt cache works


def test_symlink_leaving_the_project_is_refused(tmp_path: Path) -> None:
    root = tmp_path / "p"
    write(root / "holotype.toml", 'data = ["data"]\nseed = 1\n')
    write(tmp_path / "secret.csv", "x\n")
    (root / "data").mkdir()
    os.symlink(tmp_path / "secret.csv", root / "data" / "out.csv")
    result = run_cli("record", "--no-run", "-C", root)
    assert result.code == 2 and "data/out.csv" in result.err and "outside the project" in result.err
    (root / "holotype.toml").write_text('data = ["data"]\nseed = 1\nallow_outside = true\n')
    assert run_cli("record", "--no-run", "-C", root).code == 0


def test_link_loops_do_not_hang(tmp_path: Path) -> None:
    root = tmp_path / "p"
    (root / "data").mkdir(parents=True)
    os.symlink("loop", root / "data" / "loop")
    write(root / "holotype.toml", 'data = ["data"]\nseed = 1\nallow_outside = true\n')
    assert run_cli("record", "--no-run", "-C", root).code == 0
    assert '[data."data/loop"]\nsymlink = "loop"' in (root / "holotype.lock").read_text()


def test_file_that_keeps_changing_is_reported(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import holotype.capture.fingerprints as fp

    write(tmp_path / "d" / "grow.log", "x\n")
    real = fp.sha256_file

    def growing(path: str, counter: object = None) -> str:
        digest = real(path, counter)  # type: ignore[arg-type]
        with open(path, "a") as fh:
            fh.write("more\n")
        return digest

    monkeypatch.setattr(fp, "sha256_file", growing)
    files, _ = ProjectWalker(tmp_path).collect(("d",))
    result = fingerprint_files(files)
    assert result.problems["d/grow.log"][0] == "unstable" and "d/grow.log" not in result.records


def test_glob_patterns(tmp_path: Path) -> None:
    write(tmp_path / "raw" / "2025" / "a.csv", "x")
    write(tmp_path / "raw" / "2026" / "b.csv", "x")
    write(tmp_path / "raw" / "2026" / "b.txt", "x")
    files, unmatched = ProjectWalker(tmp_path).collect(("raw/**/*.csv", "nothing/*.csv"))
    assert list(files) == ["raw/2025/a.csv", "raw/2026/b.csv"] and unmatched == ["nothing/*.csv"]


def test_the_digest_workers_never_run_the_callers_script_again(tmp_path: Path) -> None:
    # A worker pool started by forkserver or spawn imports the main module again in every worker
    # (Python's multiprocessing documentation, "Safe importing of main module"): a user's script calling
    # the Python API without a main guard would then run again, top to bottom, once per worker.
    import subprocess
    import sys

    from holotype.capture.fingerprints import PROCESS_MIN_FILES

    project = tmp_path / "many"
    (project / "data").mkdir(parents=True)
    for i in range(PROCESS_MIN_FILES + 500):
        (project / "data" / f"f{i:05d}.txt").write_text(str(i) * 10)
    (project / "holotype.toml").write_text('data = ["data"]\nseed = 1\n')
    runs = tmp_path / "runs.txt"
    script = tmp_path / "analysis_notes.py"
    script.write_text(f"open({str(runs)!r}, 'a').write('ran\\n')\nimport holotype\n"
                      f"print(holotype.check({str(project)!r}).ok)\n")
    env = {**os.environ, "HOLOTYPE_CACHE_DIR": str(tmp_path / "cache")}
    assert subprocess.run([sys.executable, "-m", "holotype", "record", "--no-run", "--quiet", "-C", str(project)],
                          env=env).returncode == 0
    shutil.rmtree(tmp_path / "cache")  # every file is hashed again, by the workers
    done = subprocess.run([sys.executable, str(script)], env=env, capture_output=True, text=True)
    assert done.returncode == 0 and done.stdout.strip() == "True", done.stderr[-2000:]
    assert runs.read_text() == "ran\n"
