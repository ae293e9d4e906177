"""Big data folders: one lock entry and a listing object in the store, with the same findings as per-file."""

from __future__ import annotations

import gzip
import json
import os
import time
from pathlib import Path

import pytest

from conftest import run_cli, write
from holotype.capture.digest_cache import DigestCache
from holotype.lockfile import read_lock, write_lock
from holotype.manifests import FOLDER_THRESHOLD, ancestors_of, choose_folders, decode_listing, encode_listing
from holotype.records import FileRecord
from holotype.store import BaselineStore

N = FOLDER_THRESHOLD


def fill(folder: Path, count: int) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(count):
        (folder / f"well{i:05d}.dat").write_bytes(f"plate {folder.name} well {i}\n".encode())


@pytest.fixture
def project(tmp_path: Path) -> Path:
    root = tmp_path / "proj"
    write(root / "holotype.toml", 'data = ["data"]\ncode = []\nseed = 1\n')
    fill(root / "data" / "below", N - 1)
    fill(root / "data" / "above", N)
    assert run_cli("record", "--no-run", "-C", root).code == 0
    return root


def findings(root: Path, *extra: str) -> tuple[int, list[dict]]:
    result = run_cli("check", "-C", root, "--format", "json", *extra)
    assert result.code in (0, 1), result.err
    return result.code, [f for f in json.loads(result.out)["findings"] if f["area"] == "data"]


def settle() -> None:
    time.sleep(2.1)  # the cache does not trust files changed in the last two seconds


def test_a_folder_at_the_threshold_is_one_lock_entry_with_its_listing_in_the_store(project: Path) -> None:
    text = (project / "holotype.lock").read_text()
    lock = read_lock(project / "holotype.lock")
    assert set(lock.data_folders) == {"data/above"} and len(lock.data) == N - 1
    assert '[data_folders."data/above"]' in text and "data/above/well" not in text
    entry = lock.data_folders["data/above"]
    assert entry.files == N and entry.bytes == sum(p.stat().st_size for p in (project / "data/above").iterdir())
    listing = decode_listing(BaselineStore(project).get(entry.listing), "data/above", "test")
    assert len(listing) == N and listing["data/above/well00007.dat"].size == len(b"plate above well 7\n")
    assert findings(project) == (0, [])


def change_both(root: Path) -> None:
    for name in ("below", "above"):
        folder = root / "data" / name
        (folder / "well00001.dat").write_bytes(b"edited\n")
        (folder / "well00002.dat").unlink()
        (folder / "well00003.dat").rename(folder / "moved.dat")
        (folder / "zz-new.dat").write_bytes(b"new\n")


def test_the_same_changes_give_the_same_findings_below_and_above_the_threshold(project: Path) -> None:
    settle()
    assert findings(project)[0] == 0  # the unchanged folder is now known by stat
    change_both(project)
    code, found = findings(project)
    assert code == 1
    by_folder: dict[str, set[tuple[str, str, str]]] = {"below": set(), "above": set()}
    for f in found:
        folder = f["subject"].split("/")[1]
        by_folder[folder].add((f["kind"], f["subject"].replace(f"data/{folder}/", ""),
                               f["message"].replace(f"data/{folder}/", "")))
    assert by_folder["below"] == by_folder["above"]
    assert by_folder["above"] == {
        ("data.changed", "well00001.dat", "modified: size 19 bytes → 7 bytes"),
        ("data.missing", "well00002.dat", "missing (recorded, not found)"),
        ("data.renamed", "well00003.dat", "renamed to moved.dat (same content)"),
        ("data.added", "zz-new.dat", "new file inside a tracked location"),
    }


def test_crossing_the_threshold_either_way_names_only_the_changed_file(project: Path) -> None:
    (project / "data" / "below" / "extra.dat").write_bytes(b"one more\n")  # below reaches the threshold
    (project / "data" / "above" / "well00000.dat").unlink()  # above drops under it
    code, found = findings(project)
    assert code == 1
    assert {(f["kind"], f["subject"]) for f in found} == {("data.added", "data/below/extra.dat"),
                                                          ("data.missing", "data/above/well00000.dat")}


def test_a_changed_byte_with_its_mtime_put_back_is_caught_in_a_folder_known_by_stat(project: Path) -> None:
    settle()
    assert findings(project)[0] == 0
    path = project / "data" / "above" / "well00500.dat"
    st = path.stat()
    path.write_bytes(path.read_bytes().replace(b"500", b"501"))
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))  # the ctime still moves
    code, found = findings(project)
    assert code == 1 and [f["subject"] for f in found] == ["data/above/well00500.dat"]


def test_a_link_pointed_elsewhere_is_caught_in_a_folder_known_by_stat(tmp_path: Path) -> None:
    # a link's own lstat (a new inode when it is made again) and its text are part of the folder's stamp
    root = tmp_path / "proj"
    write(root / "holotype.toml", 'data = ["data"]\ncode = []\nseed = 1\n')
    fill(root / "data" / "above", N)
    (root / "data" / "above" / "latest.dat").symlink_to("well00001.dat")
    assert run_cli("record", "--no-run", "-C", root).code == 0
    settle()
    assert findings(root)[0] == 0  # the folder is now known by stat
    link = root / "data" / "above" / "latest.dat"
    link.unlink()
    link.symlink_to("well00002.dat")
    code, found = findings(root)
    assert code == 1 and [f["subject"] for f in found] == ["data/above/latest.dat"], found


def test_an_unchanged_big_folder_is_judged_by_stat_alone(project: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    settle()
    assert findings(project)[0] == 0
    asked: list[int] = []
    real = DigestCache.lookup
    monkeypatch.setattr(DigestCache, "lookup", lambda self, ids: asked.append(len(ids)) or real(self, ids))
    assert findings(project)[0] == 0
    data_lookups = [n for n in asked if n >= N - 1]
    assert data_lookups == [N - 1], asked  # the loose files are looked up; the folder's are not


def test_big_folders_are_stamped_by_worker_processes_with_the_same_findings(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from holotype.capture import folder_stamps

    root = tmp_path / "proj"
    write(root / "holotype.toml", 'data = ["data"]\nseed = 1\n')
    write(root / "analysis.py", "print('lake')\n")
    for name in ("east", "west", "north"):
        fill(root / "data" / name, N)
    assert run_cli("record", "--no-run", "-C", root).code == 0
    settle()
    assert findings(root)[0] == 0  # the folders' stamps are remembered now
    monkeypatch.setattr(folder_stamps, "WORKER_FILES", 0)
    here: list[str] = []
    real = folder_stamps.stamps_of
    monkeypatch.setattr(folder_stamps, "stamps_of", lambda walker, folders: here.extend(folders) or real(walker, folders))
    assert findings(root) == (0, [])
    assert here == [], "the stamps were taken in this process, not by the workers"
    (root / "data" / "east" / "well00010.dat").write_bytes(b"edited\n")
    for item in (root / "data" / "north").iterdir():
        item.unlink()
    (root / "data" / "north").rmdir()
    code, found = findings(root)
    assert code == 1 and here == []
    kinds = {(f["kind"], f["subject"]) for f in found}
    assert ("data.changed", "data/east/well00010.dat") in kinds, kinds
    assert not any(subject.startswith("data/west/") for _, subject in kinds)
    assert any(subject.startswith("data/north") for _, subject in kinds)
    # no worker: the same answers from this process
    monkeypatch.setattr(folder_stamps, "WORKER_FILES", 10 ** 9)
    assert findings(root) == (code, found)
    assert here


def listing_path(root: Path) -> Path:
    lock = read_lock(root / "holotype.lock")
    return BaselineStore(root).path_for(lock.data_folders["data/above"].listing)


def test_a_missing_listing_is_a_finding_and_exit_2_when_a_change_must_be_named(project: Path) -> None:
    listing_path(project).unlink()
    code, found = findings(project)
    assert code == 1 and [(f["kind"], f["subject"]) for f in found] == [("data.listing", "data/above/")]
    assert "is missing" in found[0]["message"]
    (project / "data" / "above" / "well00009.dat").write_bytes(b"edited\n")
    result = run_cli("check", "-C", project)
    assert result.code == 2 and "Traceback" not in result.err
    assert len(result.err.strip().splitlines()) == 1
    assert "data folder 'data/above'" in result.err and "is missing" in result.err


@pytest.mark.parametrize("damage", ["other bytes", "not a listing", "truncated"])
def test_a_corrupt_listing_cannot_be_judged(project: Path, damage: str) -> None:
    path = listing_path(project)
    raw = gzip.decompress(path.read_bytes())
    if damage == "other bytes":
        new = raw.replace(b"well00001", b"well00001x")
    elif damage == "not a listing":
        new = b"[data]\n" + raw
    else:
        new = raw[:-20]
    path.write_bytes(gzip.compress(new))
    (project / "data" / "above" / "well00009.dat").write_bytes(b"edited\n")
    result = run_cli("check", "-C", project)
    assert result.code == 2 and "Traceback" not in result.err
    assert "data folder 'data/above'" in result.err or "does not match its SHA-256" in result.err


def test_a_listing_holotype_did_not_write_is_refused_by_the_reader() -> None:
    good = encode_listing({"d/a": FileRecord("d/a", "file", 3, "a" * 64)})
    assert decode_listing(good, "d", "t") == {"d/a": FileRecord("d/a", "file", 3, "a" * 64)}
    for bad in (good.replace(b"d/a", b"../x"), good[:-1], good.replace(b"f\0", b"q\0"),
                good.replace(b"a" * 64, b"a" * 10)):
        with pytest.raises(Exception, match="data folder 'd'"):
            decode_listing(bad, "d", "t")


def test_a_lock_with_per_file_entries_still_reads_and_judges(project: Path) -> None:
    lock = read_lock(project / "holotype.lock")
    store = BaselineStore(project)
    for folder, entry in lock.data_folders.items():
        lock.data.update(decode_listing(store.get(entry.listing), folder, "test"))
    lock.data_folders = {}
    lock.data = dict(sorted(lock.data.items()))
    write_lock(project / "holotype.lock", lock)  # as holotype wrote it before folder entries existed
    assert "[data_folders" not in (project / "holotype.lock").read_text()
    assert findings(project) == (0, [])
    (project / "data" / "above" / "well00004.dat").write_bytes(b"edited\n")
    code, found = findings(project)
    assert code == 1 and [(f["kind"], f["subject"]) for f in found] == [("data.changed", "data/above/well00004.dat")]


def test_folder_choice_is_deepest_first() -> None:
    paths = [f"d/a/{i}" for i in range(N)] + [f"d/b/{i}" for i in range(N // 2)] + [f"d/c/{i}" for i in range(N // 2)]
    assert choose_folders(paths) == {"d/a", "d"}  # b and c are too small alone; together they make d an entry
    assert choose_folders([f"top{i}" for i in range(2 * N)]) == set()  # the project's top level never is one
    assert choose_folders([f"x/y/z/{i}" for i in range(N - 1)]) == set()


def test_the_folders_above_a_path_are_named_nearest_first() -> None:
    assert ancestors_of("data/east/well1.dat") == ["data/east", "data"]
    assert ancestors_of("top.csv") == []  # the project's top level is no folder entry


def test_many_small_files_hashed_in_worker_processes_match_hashlib(tmp_path: Path) -> None:
    import hashlib

    from holotype.capture import fingerprints
    from holotype.capture.walk import ProjectWalker

    count = fingerprints.PROCESS_MIN_FILES + 50
    fill(tmp_path / "d" / "plate", count)
    (tmp_path / "d" / "big.bin").write_bytes(os.urandom(fingerprints.SMALL + 1))  # threads take this one
    files, _ = ProjectWalker(tmp_path).collect(("d",))
    (tmp_path / "d" / "plate" / "well00017.dat").unlink()  # gone between the walk and the hashing
    result = fingerprints.fingerprint_files(files)
    assert set(result.problems) == {"d/plate/well00017.dat"} and result.problems["d/plate/well00017.dat"][0] == \
        "unreadable"
    assert len(result.records) == count  # every other small file and the big one
    for rel in ("d/big.bin", "d/plate/well00000.dat", f"d/plate/well{count - 1:05d}.dat"):
        # FIPS 180-4 SHA-256 as Python's hashlib computes it
        assert result.records[rel].sha256 == hashlib.sha256((tmp_path / rel).read_bytes()).hexdigest()


def _walk_stamp(walker: object, rel: str) -> tuple[str, int]:
    from holotype.capture.folder_stamps import stamp

    found: dict = {}
    walker.walk_below(rel, found)  # type: ignore[attr-defined]
    return (stamp([found[k] for k in sorted(found)]) if found else ""), len(found)


def test_the_plain_stamp_equals_the_stamp_of_the_walk(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the fast stamp walk must see exactly the files the project walk sees: nested folders, excludes (by
    # name and by path), declared outputs, skipped folders and a virtual environment left out
    from holotype.capture import hashing
    from holotype.capture.folder_stamps import plain_stamp

    monkeypatch.setattr(hashing, "RACY_SECONDS", -10)  # files made a moment ago get a stamp too
    from holotype.capture.walk import ProjectWalker

    root = tmp_path / "proj"
    data = root / "data"
    fill(data / "a", 30)
    fill(data / "a" / "deeper" / "still", 5)
    fill(data / "b", 3)
    write(data / "a" / "scratch.tmp", "x")
    write(data / "a" / "notes" / "draft.txt", "x")
    write(data / "a" / "out.csv", "x")
    write(data / "a" / "__pycache__" / "m.pyc", "x")
    write(data / "a" / "venv" / "pyvenv.cfg", "home = /usr\n")
    write(data / "a" / "venv" / "lib.py", "x")
    (data / "empty").mkdir()
    cases = [ProjectWalker(root), ProjectWalker(root, ("*.tmp", "data/a/notes")),
             ProjectWalker(root, (), outputs=frozenset({"data/a/out.csv"})), ProjectWalker(root, ("data/b",))]
    for walker in cases:
        for rel in ("data", "data/a", "data/b", "data/empty"):
            got = plain_stamp(walker, rel)
            assert got == _walk_stamp(walker, rel), (walker.excludes, walker.outputs, rel)
            assert rel == "data/empty" or got[0] or walker.excludes == ("data/b",)
    # a plain name, a file or an excluded folder changes the stamp as it changes the walk's
    walker = cases[1]
    before = plain_stamp(walker, "data/a")
    write(data / "a" / "scratch2.tmp", "x")  # excluded: no change
    write(data / "a" / "new.dat", "x")
    after = plain_stamp(walker, "data/a")
    assert after is not None and before is not None and after[1] == before[1] + 1 and after[0] != before[0]
    assert after == _walk_stamp(walker, "data/a")


def test_the_plain_stamp_leaves_links_and_unusual_names_to_the_walk(tmp_path: Path) -> None:
    from holotype.capture.folder_stamps import plain_stamp
    from holotype.capture.walk import ProjectWalker

    root = tmp_path / "proj"
    fill(root / "data" / "a", 3)
    walker = ProjectWalker(root)
    assert plain_stamp(walker, "data/a") is not None
    (root / "data" / "a" / "latest.dat").symlink_to("well00001.dat")
    assert plain_stamp(walker, "data/a") is None
    (root / "data" / "a" / "latest.dat").unlink()
    write(root / "data" / "a" / "Müller.dat", "x")
    assert plain_stamp(walker, "data/a") is None


def test_only_folders_holding_no_other_recorded_folder_are_set_aside(tmp_path: Path) -> None:
    # "data/a-b" sorts between "data/a" and "data/a/c": a folder's nesting is not its sorted neighbour's
    from holotype.capture.project import folders_to_set_aside
    from holotype.config import load_config
    from holotype.records import FolderRecord

    write(tmp_path / "holotype.toml", 'data = ["data"]\ncode = ["data/scripts"]\nseed = 1\n')
    names = ["data/a", "data/a-b", "data/a/c", "data/b", "data/scripts/x", "data/ab"]
    recorded = {f: FolderRecord(f, 1, 1, "0" * 64) for f in names}
    got = folders_to_set_aside(load_config(tmp_path), recorded)
    assert sorted(got) == ["data/a-b", "data/a/c", "data/ab", "data/b"]


def test_the_cyclic_collector_is_paused_while_files_are_captured_and_restored_after(
        project: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import gc

    from holotype.capture import project as capture

    seen: list[bool] = []
    real = capture.fingerprint_data
    monkeypatch.setattr(capture, "fingerprint_data", lambda *a, **k: seen.append(gc.isenabled()) or real(*a, **k))
    assert gc.isenabled()
    assert findings(project)[0] == 0
    assert seen == [False] and gc.isenabled()
    gc.disable()  # a caller that paused it itself gets it back paused
    try:
        assert findings(project)[0] == 0
        assert not gc.isenabled()
    finally:
        gc.enable()
