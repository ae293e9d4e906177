"""Whole data subfolders digested in worker processes, so that a record of a big tree is bound by hashing.

Hashing many small files is bound by Python's work per file, not by the disk: the walk's records, the
grouping into folder entries, the cache lookups, the listing lines. `record` therefore hands the plain
subfolders of its data folders to worker processes (`python -S -m holotype.capture.folder_digests`), one
per core, fed one subfolder at a time as each finishes the last. A worker walks its subfolder as the project
walk would (folder_stamps.plain_rows), looks the files up in the digest cache, hashes the rest and stores
their digests there, and answers with what the record needs rather than a row per file: the folder entries
that lie inside the subfolder, with their listing objects and stamps, and the few files left over, which
belong to an entry further up or are listed one by one. Which folders inside a subfolder become entries
depends only on the files inside it (manifests.choose_folders counts from the deepest folder up), so the
entries are those a walk of the whole tree gives.

A worker declines a subfolder it cannot take this quick way (a link, a name to check, a file it cannot read
or that kept changing while read); this process then walks and hashes that subfolder the usual way, which
says what is wrong with it. Any trouble with a worker itself has the same outcome.

Protocol: one JSON request line on standard input (root, excludes, outputs, cache path or null), then one
JSON line per subfolder. For each, one JSON header line on standard output, followed by the listing objects'
bytes, one after another, with the lengths the header gives.
"""

from __future__ import annotations

import hashlib
import json
import os
import sys
import threading
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import IO, TYPE_CHECKING, Any

from holotype.capture.digest_cache import folder_key
from holotype.capture.folder_stamps import Row, plain_rows, rows_stamp
from holotype.capture.hashing import CHUNK, Identity, Unstable, digest_rows
from holotype.capture.walk import ProjectWalker
from holotype.manifests import MAGIC, ancestors_of, choose_folders, file_entry, folder_of
from holotype.records import FolderRecord

if TYPE_CHECKING:
    import subprocess
    from pathlib import Path

    from holotype.capture.digest_cache import DigestCache

APART_MIN_FILES = 4000  # fewer data files than this: no workers (each costs some 30 ms to start)
MAX_SPLIT_DEPTH = 4  # how far down a lone subfolder is opened up to find several to share out


@dataclass
class Answer:
    """What a worker found in one subfolder: folder entries (with listing bytes and stamp), and leftovers."""

    folders: list[tuple[FolderRecord, bytes, str]] = field(default_factory=list)
    loose: list[Row] = field(default_factory=list)
    hashed: int = 0
    bytes_hashed: int = 0
    hits: int = 0


def digest_subfolder(walker: ProjectWalker, rel: str, cache: DigestCache | None, buf: bytearray) -> Answer | None:
    """Everything `record` keeps of the files below `rel`; None when the quick way cannot take them."""
    found: list[tuple[Row, str, Identity]] = []
    fresh: list[tuple[Identity, str]] = []
    base = rel.strip("/")
    real_root = str(walker.root)
    if cache is not None:  # what the last record remembered of the folder entries here, and of those above
        cache.preload_folders([folder_key(real_root, f) for f in (base, *ancestors_of(base))],
                              below=folder_key(real_root, base + "/"))

    def visit(where: int | str, cut: int, rows: list[Row]) -> None:
        """Hash one folder's files while it is open (a file is opened relative to it)."""
        known = cache.lookup([(r[1], r[2], r[3], r[4], r[5]) for r in rows]) if cache is not None else {}
        digests, idents, hashed = digest_rows(where, cut, rows, known, buf)
        found.extend(zip(rows, digests, idents))
        fresh.extend(hashed)

    try:
        if plain_rows(walker, rel, visit) is None:
            return None
    except (OSError, Unstable):
        return None
    found.sort()  # by path (the paths differ)
    rows = [row for row, _, _ in found]
    digests = [digest for _, digest, _ in found]
    idents = [ident for _, _, ident in found]  # as the file was when read (the walk's, for one known)
    sizes = [ident[2] for ident in idents]
    answer = Answer()
    answer.bytes_hashed = sum(ident[2] for ident, _ in fresh)
    answer.hashed, answer.hits = len(fresh), len(rows) - len(fresh)
    chosen = {f for f in choose_folders(r[0] for r in rows) if f == base or f.startswith(base + "/")}
    groups: dict[str, list[int]] = {}
    entry_of: dict[str, str | None] = {}
    loose: list[int] = []
    for i, row in enumerate(rows):
        parent = row[0].rpartition("/")[0]
        if parent not in entry_of:
            entry_of[parent] = folder_of(row[0], chosen)
        folder = entry_of[parent]
        if folder is None:
            answer.loose.append(row)
            loose.append(i)
        else:
            groups.setdefault(folder, []).append(i)
    for folder in sorted(groups):
        members = groups[folder]  # in path order, as the listing is
        raw = MAGIC + b"".join([file_entry(rows[i][0], digests[i], sizes[i]) for i in members])
        record = FolderRecord(folder, len(members), sum(sizes[i] for i in members), hashlib.sha256(raw).hexdigest())
        answer.folders.append((record, raw, rows_stamp([rows[i] for i in members])))
    if cache is not None and fresh:  # with nothing hashed, the cache already answers for every file here
        # a folder entry's files in one row of the cache; the loose files, which this process digests next,
        # each in a row of its own
        cache.remember_folders([(folder_key(real_root, folder), [(idents[i], digests[i]) for i in groups[folder]])
                                for folder in sorted(groups)])
        if loose:
            cache.store([(idents[i], digests[i]) for i in loose])
    return answer


def _header(rel: str, answer: Answer | None) -> bytes:
    if answer is None:
        return json.dumps({"rel": rel, "ok": False}).encode() + b"\n"
    return json.dumps({
        "rel": rel, "ok": True, "hashed": answer.hashed, "bytes": answer.bytes_hashed, "hits": answer.hits,
        "folders": [[r.path, r.files, r.bytes, r.listing, stamp, len(raw)] for r, raw, stamp in answer.folders],
        "loose": answer.loose}).encode() + b"\n"


def _read_answer(stdout: IO[bytes], rel: str) -> Answer | None:
    """One answer from a worker; None when it declined; OSError when it is gone or said something else."""
    try:
        head = json.loads(stdout.readline())
        if head.get("rel") != rel:
            raise ValueError
        if not head["ok"]:
            return None
        answer = Answer(hashed=int(head["hashed"]), bytes_hashed=int(head["bytes"]), hits=int(head["hits"]))
        for path, files, nbytes, listing, stamp, size in head["folders"]:
            raw = stdout.read(int(size))
            if len(raw) != size or hashlib.sha256(raw).hexdigest() != listing or not (
                    path == rel or str(path).startswith(rel + "/")):
                raise ValueError
            answer.folders.append((FolderRecord(str(path), int(files), int(nbytes), str(listing)), raw, str(stamp)))
        for path, *numbers in head["loose"]:
            if not str(path).startswith(rel + "/"):
                raise ValueError
            a, b, c, d, e = (int(n) for n in numbers)
            answer.loose.append((str(path), a, b, c, d, e))
        return answer
    except (ValueError, TypeError, KeyError, AttributeError) as exc:
        raise OSError(f"a digest worker gave no usable answer for '{rel}'") from exc


@dataclass
class ApartResult:
    """The answers of all subfolders handed out, and the ones this process must walk and hash itself."""

    answers: dict[str, Answer] = field(default_factory=dict)
    declined: list[str] = field(default_factory=list)


def request_for(walker: ProjectWalker, cache: Path | None) -> dict[str, Any]:
    """What a worker is told before its subfolders: the walk's rules, and the digest cache."""
    return {"root": os.path.realpath(walker.root), "excludes": list(walker.excludes),
            "allow_outside": walker.allow_outside, "outputs": sorted(walker.outputs),
            "cache": None if cache is None else str(cache)}


class FolderDigesters:
    """Worker processes digesting `subfolders` while this process does other work; `result()` waits."""

    def __init__(self, walker: ProjectWalker, subfolders: list[str], cache: Path | None) -> None:
        from holotype.capture import head_start

        self.queue = deque(subfolders)
        self.subfolders = list(subfolders)
        self.got = ApartResult()
        self.files_done = 0
        self.bytes_done = 0
        self.lock = threading.Lock()
        self.procs: list[subprocess.Popen[bytes]] = []
        self.request = request_for(walker, cache)
        argv, env = head_start.worker_command("holotype.capture.folder_digests")
        import subprocess

        try:
            for _ in range(max(1, min(os.cpu_count() or 1, 4, len(subfolders)))):
                self.procs.append(subprocess.Popen(argv, stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                                   stderr=subprocess.DEVNULL, env=env))
        except OSError:
            pass  # those that started do the work; with none, this process does it all
        self.threads = [threading.Thread(target=self._feed, args=(proc, json.dumps(self.request).encode() + b"\n"),
                                         name=f"holotype-digest-{k}", daemon=True)
                        for k, proc in enumerate(self.procs)]
        for t in self.threads:
            t.start()

    @classmethod
    def start(cls, walker: ProjectWalker, subfolders: list[str], cache: Path | None) -> FolderDigesters:
        """Workers for these subfolders: those started ahead for exactly the same (head_start.py), or new."""
        from holotype.capture import head_start

        request = request_for(walker, cache)
        ahead = head_start.take_ahead(lambda started: isinstance(started, FolderDigesters) and
                                      started.request == request and started.subfolders == subfolders)
        return ahead if ahead is not None else cls(walker, subfolders, cache)

    def _feed(self, proc: subprocess.Popen[bytes], request: bytes) -> None:
        """Give the worker one subfolder at a time, and keep its answers."""
        assert proc.stdin is not None and proc.stdout is not None
        try:
            proc.stdin.write(request)
            while True:
                with self.lock:
                    if not self.queue:
                        break
                    rel = self.queue.popleft()
                try:
                    proc.stdin.write(json.dumps(rel).encode() + b"\n")
                    proc.stdin.flush()
                    answer = _read_answer(proc.stdout, rel)
                except OSError:
                    with self.lock:
                        self.got.declined.append(rel)
                    return
                with self.lock:
                    if answer is None:
                        self.got.declined.append(rel)
                    else:
                        self.got.answers[rel] = answer
                        self.files_done += answer.hashed + answer.hits
                        self.bytes_done += answer.bytes_hashed
        finally:
            try:
                proc.stdin.close()
            except OSError:
                pass

    def result(self, progress: Callable[[int, int], None] | None = None) -> ApartResult:
        """Wait for the workers (telling `progress` the bytes and files done meanwhile)."""
        try:
            for t in self.threads:
                while t.is_alive():
                    t.join(timeout=0.1)
                    if progress is not None:
                        progress(self.bytes_done, self.files_done)
        finally:
            self.stop()
        with self.lock:  # whatever no worker took (none started, or all are gone)
            self.got.declined.extend(self.queue)
            self.queue.clear()
        self.got.declined.sort()
        return self.got

    def stop(self) -> None:
        """Stop the workers; what they did not answer is left for this process."""
        from holotype.capture import head_start

        head_start.stop(self.procs)
        self.procs = []


def serve(request: dict[str, Any], source: IO[bytes], sink: IO[bytes]) -> None:
    """The worker: answer each subfolder named on `source`, in order."""
    walker = ProjectWalker(request["root"], tuple(request["excludes"]), bool(request["allow_outside"]),
                           outputs=frozenset(request["outputs"]))
    cache = None
    if request.get("cache"):
        from pathlib import Path

        from holotype.capture.digest_cache import DigestCache
        from holotype.errors import HolotypeError

        try:
            cache = DigestCache(Path(request["cache"]))
        except HolotypeError:
            cache = None
    buf = bytearray(CHUNK)
    try:
        for line in source:
            rel = str(json.loads(line))
            try:
                answer = digest_subfolder(walker, rel, cache, buf)
            except Exception:  # noqa: BLE001 - whatever went wrong, the caller takes this subfolder itself
                answer = None
            sink.write(_header(rel, answer))
            for _, raw, _ in answer.folders if answer is not None else ():
                sink.write(raw)
            sink.flush()
    finally:
        if cache is not None:
            cache.close()


def main() -> None:
    request = json.loads(sys.stdin.buffer.readline())
    serve(request, sys.stdin.buffer, sys.stdout.buffer)


if __name__ == "__main__":
    main()
