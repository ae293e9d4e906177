"""SHA-256 of every byte of the tracked files: parallel, largest first, cached, and wary of files that move."""

from __future__ import annotations

import hashlib
import os
import threading
from concurrent.futures import FIRST_COMPLETED, Future, ThreadPoolExecutor, wait
from dataclasses import dataclass, field
from typing import Protocol

from holotype.capture.digest_cache import DigestCache, Identity, identity_of
from holotype.capture.walk import ProjectFile
from holotype.records import FileRecord

CHUNK = 1 << 20  # hashlib releases the GIL for updates this large, so threads really run in parallel


class HashProgress(Protocol):
    def begin(self, files: int, total_bytes: int) -> None: ...
    def advance(self, nbytes: int, files_done: int) -> None: ...
    def end(self) -> None: ...


@dataclass
class FingerprintResult:
    records: dict[str, FileRecord] = field(default_factory=dict)
    problems: dict[str, tuple[str, str]] = field(default_factory=dict)  # rel -> (kind, message)
    files_hashed: int = 0
    bytes_hashed: int = 0
    cache_hits: int = 0


class _Counter:
    def __init__(self) -> None:
        self.bytes = 0
        self.lock = threading.Lock()

    def add(self, n: int) -> None:
        with self.lock:
            self.bytes += n


def sha256_file(path: str | os.PathLike[str], counter: _Counter | None = None) -> str:
    """Stream the file through SHA-256 (FIPS 180-4) in 1 MiB chunks."""
    h = hashlib.sha256()
    buf = bytearray(CHUNK)
    view = memoryview(buf)
    with open(path, "rb", buffering=0) as fh:
        while True:
            n = fh.readinto(buf)
            if not n:
                break
            h.update(view[:n])
            if counter is not None:
                counter.add(n)
    return h.hexdigest()


def _hash_stable(path: str, counter: _Counter) -> tuple[str, os.stat_result]:
    """Hash, then check the file did not change meanwhile; retry once, then give up loudly."""
    for _attempt in range(2):
        before = os.stat(path)
        digest = sha256_file(path, counter)
        after = os.stat(path)
        if (before.st_size, before.st_mtime_ns) == (after.st_size, after.st_mtime_ns):
            return digest, after
    raise _Unstable()


class _Unstable(Exception):
    pass


def fingerprint_files(files: dict[str, ProjectFile], *, cache: DigestCache | None = None,
                      progress: HashProgress | None = None, workers: int | None = None) -> FingerprintResult:
    """Digest every file; links are recorded by their target text; problems are returned, not raised."""
    result = FingerprintResult()
    to_hash: list[tuple[ProjectFile, os.stat_result]] = []
    for rel, item in files.items():
        if item.is_link:
            try:
                result.records[rel] = FileRecord(rel, "symlink", target=os.readlink(item.path))
            except OSError as exc:
                result.problems[rel] = ("unreadable", f"cannot read link: {exc.strerror}")
            continue
        try:
            st = os.stat(item.path)
        except OSError as exc:
            result.problems[rel] = ("unreadable", f"cannot stat: {exc.strerror}")
            continue
        to_hash.append((item, st))

    known: dict[Identity, str] = cache.lookup([identity_of(st) for _, st in to_hash]) if cache else {}
    pending: list[tuple[ProjectFile, os.stat_result]] = []
    for item, st in to_hash:
        digest = known.get(identity_of(st))
        if digest is not None:
            result.records[item.rel] = FileRecord(item.rel, "file", size=st.st_size, sha256=digest)
            result.cache_hits += 1
        else:
            pending.append((item, st))

    pending.sort(key=lambda pair: pair[1].st_size, reverse=True)  # a giant file must not start last
    counter = _Counter()
    total = sum(st.st_size for _, st in pending)
    fresh: list[tuple[Identity, str]] = []
    if pending:
        if progress is not None:
            progress.begin(len(pending), total)
        workers = max(1, min(workers or os.cpu_count() or 1, len(pending)))
        done_files = 0
        try:
            with ThreadPoolExecutor(max_workers=workers, thread_name_prefix="holotype-hash") as pool:
                futures: dict[Future[tuple[str, os.stat_result]], ProjectFile] = {
                    pool.submit(_hash_stable, str(item.path), counter): item for item, _ in pending
                }
                remaining = set(futures)
                while remaining:
                    finished, remaining = wait(remaining, timeout=0.1, return_when=FIRST_COMPLETED)
                    for fut in finished:
                        item = futures[fut]
                        done_files += 1
                        try:
                            digest, st = fut.result()
                        except _Unstable:
                            result.problems[item.rel] = ("unstable", "kept changing while being read; "
                                                         "stop whatever writes it and record again")
                            continue
                        except OSError as exc:
                            result.problems[item.rel] = ("unreadable", f"cannot read: {exc.strerror}")
                            continue
                        result.records[item.rel] = FileRecord(item.rel, "file", size=st.st_size, sha256=digest)
                        result.files_hashed += 1
                        fresh.append((identity_of(st), digest))
                    if progress is not None:
                        progress.advance(counter.bytes, done_files)
        finally:
            if progress is not None:
                progress.end()
    result.bytes_hashed = counter.bytes
    if cache is not None and fresh:
        cache.store(fresh)
    result.records = dict(sorted(result.records.items()))
    return result

