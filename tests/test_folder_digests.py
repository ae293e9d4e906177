"""Data subfolders digested whole by worker processes give exactly the record a walk here gives."""

from __future__ import annotations

import hashlib
import io
import json
import os
import sys
from pathlib import Path

import pytest

from conftest import run_cli, write
from holotype.capture import folder_digests, project
from holotype.capture.hashing import CHUNK, Unstable, digest_rows, digest_walked, identity_of
from holotype.lockfile import read_lock
from holotype.manifests import FOLDER_THRESHOLD
from holotype.store import BaselineStore

N = FOLDER_THRESHOLD


def fill(folder: Path, count: int, tag: str = "") -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(count):
        (folder / f"well{i:05d}.dat").write_bytes(f"{tag}plate {folder.name} well {i}\n".encode())


def build(root: Path) -> None:
    """A tree with what the quick way must treat as the walk does: nested entries, leftovers that belong to
    an entry further up, excludes by name and by path, an output, a skipped folder, a venv, an empty folder,
    and subfolders it must decline (a link, a name to check)."""
    write(root / "holotype.toml", 'data = ["data"]\nexclude = ["*.tmp", "data/skipme"]\nseed = 1\n\n'
                                  '[[analysis]]\nname = "fit"\ncommand = "python fit.py"\n'
                                  'outputs = ["data/a/out.csv"]\n')
    write(root / "fit.py", "print('lake')\n")
    data = root / "data"
    fill(data / "a", N)
    fill(data / "a" / "deeper" / "still", 5)
    fill(data / "b" / "one", N // 2)  # two halves: the entry is their parent b, made of leftovers
    fill(data / "b" / "two", N // 2)
    fill(data / "small", 3)
    write(data / "a" / "scratch.tmp", "x")
    write(data / "a" / "out.csv", "x")
    write(data / "a" / "__pycache__" / "m.pyc", "x")
    write(data / "a" / "venv" / "pyvenv.cfg", "home = /usr\n")
    write(data / "a" / "venv" / "lib.py", "x")
    fill(data / "skipme", 4)
    fill(data / "linked", 6)
    os.symlink("well00000.dat", data / "linked" / "alias.dat")
    fill(data / "named", 2)
    write(data / "named" / "über.dat", "x")
    (data / "empty").mkdir()
    write(data / "top.csv", "x\n1\n")


def recorded(root: Path) -> tuple[object, object, dict[str, bytes], list[str]]:
    result = run_cli("record", "--no-run", "-C", root, "--format", "json")
    assert result.code == 0, result.err
    lock = read_lock(root / "holotype.lock")
    store = BaselineStore(root)
    listings = {f: store.get(rec.listing) for f, rec in lock.data_folders.items()}
    notes = [f["message"] for f in json.loads(result.out)["findings"] if f["area"] == "data"]
    return lock.data, lock.data_folders, listings, notes


def spy_answers(monkeypatch: pytest.MonkeyPatch) -> tuple[list[str], list[str]]:
    taken: list[str] = []
    declined: list[str] = []
    real = folder_digests.FolderDigesters.result

    def result(self: folder_digests.FolderDigesters, *args: object, **kwargs: object) -> folder_digests.ApartResult:
        got = real(self, *args, **kwargs)  # type: ignore[arg-type]
        taken.extend(got.answers)
        declined.extend(got.declined)
        return got

    monkeypatch.setattr(folder_digests.FolderDigesters, "result", result)
    return taken, declined


def test_a_record_digested_by_workers_equals_one_digested_here(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    here_root, there_root = tmp_path / "here", tmp_path / "there"
    build(here_root)
    build(there_root)
    taken, declined = spy_answers(monkeypatch)
    monkeypatch.setattr(project, "APART_MIN_FILES", 10 ** 9)
    here = recorded(here_root)
    assert taken == [] and declined == []
    monkeypatch.setattr(project, "APART_MIN_FILES", 0)
    there = recorded(there_root)
    assert "data/a" in taken and "data/b" in taken, taken
    assert declined == ["data/linked", "data/named"]  # a link, a name to check: walked here, which says why
    assert there == here
    data, folders, listings, _ = here
    assert set(folders) == {"data/a", "data/b"}  # type: ignore[call-overload]
    assert b"data/a/deeper/still/well00004.dat" in listings["data/a"] and "data/linked/alias.dat" in data  # type: ignore[operator]
    assert not any(k.startswith(("data/skipme", "data/a/venv", "data/a/__pycache__")) or k.endswith(
        (".tmp", "out.csv")) for k in data)  # type: ignore[union-attr]


def test_workers_that_fail_leave_every_subfolder_to_this_process(tmp_path: Path,
                                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    from holotype.capture import head_start

    here_root, there_root = tmp_path / "here", tmp_path / "there"
    build(here_root)
    build(there_root)
    monkeypatch.setattr(project, "APART_MIN_FILES", 10 ** 9)
    here = recorded(here_root)
    monkeypatch.setattr(project, "APART_MIN_FILES", 0)
    taken, declined = spy_answers(monkeypatch)
    for program in ("pass", "import sys; sys.stdin.readline(); print('{\"rel\": \"elsewhere\", \"ok\": true}')"):
        monkeypatch.setattr(head_start, "worker_command",
                            lambda module, program=program: ([sys.executable, "-c", program], dict(os.environ)))
        assert recorded(there_root) == here
        assert taken == [] and "data/a" in declined
        declined.clear()


def test_the_workers_answer_is_checked_before_it_is_used() -> None:
    raw = b"holotype listing 1\n"
    good = {"rel": "data/a", "ok": True, "hashed": 0, "bytes": 0, "hits": 0,
            "folders": [["data/a", 0, 0, hashlib.sha256(raw).hexdigest(), "", len(raw)]], "loose": []}
    line = json.dumps(good).encode() + b"\n"
    got = folder_digests._read_answer(io.BytesIO(line + raw), "data/a")
    assert got is not None and got.folders[0][1] == raw
    assert folder_digests._read_answer(io.BytesIO(b'{"rel": "data/a", "ok": false}\n'), "data/a") is None
    bad = [
        line + raw[:-1],  # truncated
        line + raw.replace(b"1", b"2"),  # not the listing the digest names
        json.dumps({**good, "rel": "data/b"}).encode() + b"\n" + raw,  # an answer for another subfolder
        json.dumps({**good, "folders": [["elsewhere", 0, 0, good["folders"][0][3], "", len(raw)]]}).encode()  # type: ignore[index]
        + b"\n" + raw,  # an entry outside the subfolder
        json.dumps({**good, "loose": [["../etc/passwd", 1, 2, 3, 4, 5]]}).encode() + b"\n" + raw,
        b"",  # the worker is gone
        b"not json\n",
    ]
    for answer in bad:
        with pytest.raises(OSError):
            folder_digests._read_answer(io.BytesIO(answer), "data/a")


def test_a_file_that_keeps_changing_makes_the_worker_decline(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from holotype.capture.walk import ProjectWalker

    fill(tmp_path / "data" / "a", 3)
    walker = ProjectWalker(tmp_path)
    buf = bytearray(CHUNK)
    got = folder_digests.digest_subfolder(walker, "data/a", None, buf)
    assert got is not None and got.hashed == 3 and [r.files for r, _, _ in got.folders] == [] and len(got.loose) == 3

    def unstable(*args: object) -> tuple[str, object]:
        raise Unstable()

    monkeypatch.setattr(folder_digests, "digest_rows", unstable)
    assert folder_digests.digest_subfolder(walker, "data/a", None, buf) is None


@pytest.mark.parametrize("size", [0, 1, 1023, CHUNK - 1, CHUNK, CHUNK + 1, 3 * CHUNK + 5])
def test_a_walked_file_digest_is_hashlibs(tmp_path: Path, size: int) -> None:
    # reference: hashlib's SHA-256 (FIPS 180-4) of the same bytes
    path = tmp_path / "f.bin"
    body = os.urandom(size)
    path.write_bytes(body)
    digest, ident = digest_walked(str(path), identity_of(os.stat(path)), bytearray(CHUNK))
    assert digest == hashlib.sha256(body).hexdigest() and ident == identity_of(os.stat(path))
    row = ("f.bin", *identity_of(os.stat(path)))
    assert digest_rows(str(tmp_path), 0, [row], {}, bytearray(CHUNK)) == ([digest], [ident], [(ident, digest)])
    # a file the cache knows by its identity is not read again
    assert digest_rows(str(tmp_path), 0, [row], {ident: "0" * 64}, bytearray(CHUNK)) == (["0" * 64], [ident], [])


def test_a_walked_file_that_grew_is_read_to_its_end(tmp_path: Path) -> None:
    path = tmp_path / "f.bin"
    path.write_bytes(b"abc")
    before = identity_of(os.stat(path))
    path.write_bytes(b"abcdef" * 1000)  # grew after the walk saw it
    digest, ident = digest_walked(str(path), before, bytearray(CHUNK))
    assert digest == hashlib.sha256(b"abcdef" * 1000).hexdigest() and ident[2] == 6000
    got = digest_rows(str(tmp_path), 0, [("f.bin", *before)], {}, bytearray(CHUNK))
    assert (got[0], [ident[2] for ident in got[1]]) == ([digest], [6000])
    path.write_bytes(b"ab")  # and shrank
    got = digest_rows(str(tmp_path), 0, [("f.bin", *before)], {}, bytearray(CHUNK))
    assert (got[0], [ident[2] for ident in got[1]]) == ([hashlib.sha256(b"ab").hexdigest()], [2])


def test_a_walked_file_replaced_by_a_link_or_a_pipe_is_refused(tmp_path: Path) -> None:
    target = tmp_path / "target"
    target.write_bytes(b"x")
    link = tmp_path / "link"
    os.symlink(target, link)
    with pytest.raises(OSError):
        digest_walked(str(link), identity_of(os.stat(target)), bytearray(CHUNK))
    if hasattr(os, "mkfifo"):
        pipe = tmp_path / "pipe"
        os.mkfifo(pipe)
        with pytest.raises(OSError):
            digest_walked(str(pipe), identity_of(os.stat(target)), bytearray(CHUNK))
        with pytest.raises(OSError):
            digest_rows(str(tmp_path), 0, [("pipe", *identity_of(os.stat(target)))], {}, bytearray(CHUNK))
    with pytest.raises(OSError):
        digest_rows(str(tmp_path), 0, [("link", *identity_of(os.stat(target)))], {}, bytearray(CHUNK))


def test_which_subfolders_are_handed_out(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from holotype.config import load_config

    root = tmp_path / "proj"
    for name in ("p1", "p2", "p3"):
        fill(root / "data" / "raw" / "plates" / name, 2)
    write(root / "data" / "raw" / "readme.txt", "x")
    write(root / "holotype.toml", 'data = ["data"]\nseed = 1\n')
    monkeypatch.setattr(project, "APART_MIN_FILES", 0)
    # a lone subfolder is opened up until there are several to share out
    assert project.subfolders_apart(load_config(root)) == [f"data/raw/plates/p{i}" for i in (1, 2, 3)]
    write(root / "holotype.toml", 'data = ["data"]\ncode = ["data/raw/plates/p2/*.py"]\nseed = 1\n')
    assert project.subfolders_apart(load_config(root)) == ["data/raw/plates/p1", "data/raw/plates/p3"]
    write(root / "holotype.toml", 'data = ["data/*/plates"]\nseed = 1\n')
    assert project.subfolders_apart(load_config(root)) == []  # a glob: the walk decides what is data
    write(root / "holotype.toml", 'data = ["data"]\nseed = 1\n')
    monkeypatch.setattr(project, "APART_MIN_FILES", 100)
    assert project.subfolders_apart(load_config(root)) == []  # too few files for workers to pay


def test_a_pattern_whose_subfolders_hold_no_file_still_matches_nothing(tmp_path: Path,
                                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    outcomes = []
    for threshold in (10 ** 9, 0):
        root = tmp_path / f"proj{threshold}"
        write(root / "holotype.toml", 'data = ["more", "data"]\nseed = 1\n')
        (root / "data" / "a").mkdir(parents=True)
        (root / "data" / "b").mkdir()
        fill(root / "more", 2)
        monkeypatch.setattr(project, "APART_MIN_FILES", threshold)
        result = run_cli("record", "--no-run", "-C", root)
        outcomes.append((result.code, result.err.replace(str(root), "ROOT")))
    assert outcomes[0] == outcomes[1] and outcomes[0][0] == 2 and "data pattern 'data' matches no file" in outcomes[0][1]


def test_the_workers_a_record_starts_ahead_are_used_only_for_the_same_request(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from holotype.capture import head_start

    root = tmp_path / "proj"
    build(root)
    monkeypatch.setattr(project, "APART_MIN_FILES", 0)
    adopted: list[object] = []
    real = head_start.take_ahead
    monkeypatch.setattr(head_start, "take_ahead", lambda *a: adopted.append(real(*a)) or adopted[-1])
    first = recorded(root)
    assert len(adopted) == 1 and adopted[0] is not None  # started while holotype loaded, and taken
    # started ahead for other rules (the configuration changed in between): stopped, not used
    stopped: list[object] = []
    real_begin = project.begin_digests

    def begin_then_change(project_folder: Path) -> None:
        real_begin(project_folder)
        stopped.extend(head_start._ahead)
        text = (root / "holotype.toml").read_text()
        (root / "holotype.toml").write_text(text.replace('"data/skipme"', '"data/skipme", "data/a/deeper"'))

    monkeypatch.setattr(project, "begin_digests", begin_then_change)
    second = recorded(root)
    assert adopted[-1] is None and stopped and all(not p.procs for p in stopped)  # type: ignore[attr-defined]
    assert b"data/a/deeper/" not in second[2]["data/a"] and b"data/a/deeper/" in first[2]["data/a"]
    assert not head_start._ahead  # nothing left running after the command


def test_a_subfolder_that_is_a_link_now_is_declined(tmp_path: Path) -> None:
    from holotype.capture.folder_stamps import plain_rows
    from holotype.capture.walk import ProjectWalker

    outside = tmp_path / "outside"
    fill(outside, 3)
    (tmp_path / "proj" / "data").mkdir(parents=True)
    os.symlink(outside, tmp_path / "proj" / "data" / "a")  # swapped in after the subfolders were listed
    walker = ProjectWalker(tmp_path / "proj")
    assert plain_rows(walker, "data/a") is None
    assert folder_digests.digest_subfolder(walker, "data/a", None, bytearray(CHUNK)) is None


def test_a_workers_folder_entry_is_one_cache_row_and_a_later_change_is_hashed_alone(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import sqlite3

    from holotype.capture import data_folders, fingerprints

    monkeypatch.setenv("HOLOTYPE_CACHE_DIR", str(tmp_path / "cache"))
    root = tmp_path / "proj"
    write(root / "holotype.toml", 'data = ["data"]\nseed = 1\n')
    fill(root / "data" / "east", N)
    fill(root / "data" / "west", N)
    fill(root / "data" / "few", 3)  # listed one by one
    import time

    time.sleep(2.1)  # the cache remembers no file changed in the last two seconds
    monkeypatch.setattr(project, "APART_MIN_FILES", 0)
    taken, _ = spy_answers(monkeypatch)
    hashed: list[int] = []
    real = data_folders.fingerprint_data

    def spy(*args: object, **kwargs: object) -> data_folders.DataResult:
        got = real(*args, **kwargs)  # type: ignore[arg-type]
        hashed.append(got.files_hashed)
        return got

    monkeypatch.setattr(project, "fingerprint_data", spy)
    assert run_cli("record", "--no-run", "-C", root).code == 0
    assert "data/east" in taken and hashed == [2 * N + 3]
    inodes = {os.stat(p).st_ino: p.parent.name for p in (root / "data").rglob("*.dat")}
    with sqlite3.connect(tmp_path / "cache" / "digests.sqlite3") as db:
        rows = [inodes[ino] for (ino,) in db.execute("SELECT ino FROM digests") if ino in inodes]
        folders = db.execute("SELECT count(*) FROM folder_files").fetchone()[0]
    assert folders == 2  # one row per folder entry, none per file of it
    assert rows == ["few"] * 3  # the files listed one by one have rows of their own
    def row_ids() -> list[tuple[int, str]]:
        with sqlite3.connect(tmp_path / "cache" / "digests.sqlite3") as db:
            return sorted(db.execute("SELECT rowid, key FROM folder_files"))

    before = row_ids()
    assert run_cli("record", "--no-run", "-C", root).code == 0
    assert hashed[-1] == 0  # a second record knows every file, the workers' folders included
    assert row_ids() == before  # and writes no folder row again (a replaced row gets a new rowid)
    (root / "data" / "east" / "well00007.dat").write_bytes(b"changed\n")
    counted: list[int] = []
    real_hash = fingerprints._hash_all
    monkeypatch.setattr(fingerprints, "_hash_all", lambda pending, *rest: counted.append(len(pending)) or real_hash(
        pending, *rest))
    result = run_cli("check", "-C", root, "--format", "json")
    assert result.code == 1
    assert [f["subject"] for f in json.loads(result.out)["findings"] if f["area"] == "data"] == [
        "data/east/well00007.dat"]
    assert counted == [1]  # the changed folder's other files came from its row


def test_folder_rows_round_trip_and_refuse_other_shapes() -> None:
    from holotype.capture.digest_cache import pack_files, unpack_files

    pairs = [((2049, 7, 10, 1_700_000_000_123_456_789, 1_700_000_000_987_654_321), hashlib.sha256(b"a").hexdigest()),
             ((-1, 2**62, 0, 0, 1), hashlib.sha256(b"").hexdigest())]
    blob = pack_files(pairs)
    assert len(blob) == 2 * (40 + 32) and unpack_files(blob) == dict(pairs)
    assert unpack_files(blob[:-1]) == {} and unpack_files(b"") == {}
