"""SHA-256 of every byte of the tracked files: parallel, largest first, cached, and wary of files that move."""

from __future__ import annotations

import errno
import hashlib
import os
import stat
import threading
from collections import deque
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


_buffers = threading.local()


def _buffer() -> bytearray:
    # one reusable buffer per thread: allocating 1 MiB per file dominates when files are small
    buf = getattr(_buffers, "buf", None)
    if buf is None:
        buf = _buffers.buf = bytearray(CHUNK)
    return buf


_OPEN_FLAGS = (os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0)
               | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0))


def sha256_file(path: str | os.PathLike[str], counter: _Counter | None = None) -> str:
    """Stream the file through SHA-256 (FIPS 180-4) in 1 MiB chunks.

    Opened without following a link and without blocking, then checked to be a regular file, so a file
    swapped for a link, a FIFO or a device while holotype works is refused (as OSError), never read."""
    h = hashlib.sha256()
    buf = _buffer()
    view = memoryview(buf)
    fd = os.open(path, _OPEN_FLAGS)
    if not stat.S_ISREG(os.fstat(fd).st_mode):
        os.close(fd)
        raise OSError(errno.EINVAL, "not a regular file (a link, pipe or device took its place)")
    with open(fd, "rb", buffering=0) as fh:
        while True:
            n = fh.readinto(buf)
            if not n:
                break
            h.update(view[:n])
            if counter is not None:
                counter.add(n)
    return h.hexdigest()


def _hash_stable(path: str, counter: _Counter, before: Identity) -> tuple[str, Identity]:
    """Hash, then check the file did not change meanwhile; retry once, then give up loudly."""
    for attempt in range(2):
        if attempt:
            before = identity_of(os.stat(path))
        digest = sha256_file(path, counter)
        after = identity_of(os.stat(path))
        if (before[2], before[3]) == (after[2], after[3]):
            return digest, after
    raise _Unstable()


class _Unstable(Exception):
    pass


Outcome = tuple[str, Identity] | OSError | _Unstable


SMALL = 64 * 1024  # many files up to this size go to worker processes (for them, the per-file work dominates)
PROCESS_MIN_FILES = 4000  # fewer small files than this: threads (a worker process costs some 50 ms to start)
BATCH = 1000


def digest_batch(batch: list[tuple[str, Identity]]) -> list[str | tuple[str, object, object]]:
    """Digest small files in a worker process. Each answer is the digest (the file kept the identity it was
    walked with: the usual case, and cheap to send back), or ("ok", digest, identity), ("os", errno, text)
    or ("unstable", 0, 0)."""
    out: list[str | tuple[str, object, object]] = []
    counter = _Counter()
    for path, before in batch:
        try:
            digest, after = _hash_stable(path, counter, before)
            out.append(digest if after == before else ("ok", digest, after))
        except _Unstable:
            out.append(("unstable", 0, 0))
        except OSError as exc:
            out.append(("os", exc.errno, exc.strerror))
    return out


def _hash_in_processes(items: list[tuple[ProjectFile, Identity]], workers: int, counter: _Counter,
                       progress: HashProgress | None) -> list[Outcome]:
    """Many small files: Python's per-file work holds the GIL, so batches go to worker processes."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    methods = multiprocessing.get_all_start_methods()
    context = multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")
    outcomes: list[Outcome] = []
    batches = [[(item.path, ident) for item, ident in items[i:i + BATCH]] for i in range(0, len(items), BATCH)]
    done = 0
    with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
        for batch, answers in zip(batches, pool.map(digest_batch, batches)):
            for (_, before), answer in zip(batch, answers):
                if isinstance(answer, str):
                    outcomes.append((answer, before))
                    counter.add(before[2])
                    continue
                kind, a, b = answer
                if kind == "ok":
                    assert isinstance(a, str) and isinstance(b, tuple)
                    outcomes.append((a, b))
                    counter.add(b[2])
                elif kind == "unstable":
                    outcomes.append(_Unstable())
                else:
                    assert isinstance(a, int) and isinstance(b, str)
                    outcomes.append(OSError(a, b))
            done += len(batch)
            if progress is not None:
                progress.advance(counter.bytes, done)
    return outcomes


def _hash_all(items: list[tuple[ProjectFile, Identity]], counter: _Counter, workers: int | None,
              progress: HashProgress | None) -> list[Outcome]:
    """Hash on a few threads that take the next file from a shared queue (linear in the file count); the
    small files go to worker processes when there are many of them."""
    count = max(1, min(workers or os.cpu_count() or 1, len(items)))
    small_from = next((i for i, (_, ident) in enumerate(items) if ident[2] <= SMALL), len(items))
    if count > 1 and len(items) - small_from >= PROCESS_MIN_FILES:  # items come largest first
        try:
            tail = _hash_in_processes(items[small_from:], count, counter, progress)
        except (OSError, RuntimeError, ImportError):
            tail = None  # no worker processes here (a sandbox, say): threads do it all
        if tail is not None:
            head = _hash_all(items[:small_from], counter, workers, None) if small_from else []
            if progress is not None:
                progress.end()
            return head + tail
    if small_from == 0 or count == 1:
        count = 1  # small files only: one thread (two only fight over the GIL)
    outcomes: list[Outcome | None] = [None] * len(items)
    queue = deque(range(len(items)))
    done = [0]
    lock = threading.Lock()

    def work() -> None:
        while True:
            try:
                index = queue.popleft()
            except IndexError:
                return
            try:
                item, st = items[index]
                outcomes[index] = _hash_stable(item.path, counter, st)
            except (OSError, _Unstable) as exc:
                outcomes[index] = exc
            with lock:
                done[0] += 1

    threads = [threading.Thread(target=work, name=f"holotype-hash-{i}", daemon=True) for i in range(count)]
    for t in threads:
        t.start()
    try:
        for t in threads:
            while t.is_alive():
                t.join(timeout=0.1)
                if progress is not None:
                    progress.advance(counter.bytes, done[0])
    finally:
        if progress is not None:
            progress.end()
    return [o if o is not None else OSError(0, "not hashed") for o in outcomes]


def fingerprint_files(files: dict[str, ProjectFile], *, cache: DigestCache | None = None,
                      progress: HashProgress | None = None, workers: int | None = None) -> FingerprintResult:
    """Digest every file; links are recorded by their target text; problems are returned, not raised."""
    result = FingerprintResult()
    to_hash: list[tuple[ProjectFile, Identity]] = []
    for rel, item in files.items():
        if item.is_link:
            try:
                result.records[rel] = FileRecord(rel, "symlink", target=os.readlink(item.path))
            except OSError as exc:
                result.problems[rel] = ("unreadable", f"cannot read link: {exc.strerror}")
            continue
        ident = item.ident
        if ident is None:
            try:
                ident = identity_of(os.stat(item.path))
            except OSError as exc:
                result.problems[rel] = ("unreadable", f"cannot stat: {exc.strerror}")
                continue
        to_hash.append((item, ident))

    known: dict[Identity, str] = cache.lookup([ident for _, ident in to_hash]) if cache else {}
    pending: list[tuple[ProjectFile, Identity]] = []
    records = result.records
    for item, ident in to_hash:
        digest = known.get(ident)
        if digest is not None:
            records[item.rel] = FileRecord(item.rel, "file", ident[2], digest)
        else:
            pending.append((item, ident))
    result.cache_hits = len(to_hash) - len(pending)

    pending.sort(key=lambda pair: pair[1][2], reverse=True)  # a giant file must not start last
    counter = _Counter()
    total = sum(ident[2] for _, ident in pending)
    fresh: list[tuple[Identity, str]] = []
    if pending:
        if progress is not None:
            progress.begin(len(pending), total)
        outcomes = _hash_all(pending, counter, workers, progress)
        for item, outcome in zip((item for item, _ in pending), outcomes):
            if isinstance(outcome, tuple):
                digest, ident = outcome
                result.records[item.rel] = FileRecord(item.rel, "file", size=ident[2], sha256=digest)
                result.files_hashed += 1
                fresh.append((ident, digest))
            elif isinstance(outcome, _Unstable):
                result.problems[item.rel] = ("unstable", "kept changing while being read; "
                                             "stop whatever writes it and record again")
            else:
                result.problems[item.rel] = ("unreadable", f"cannot read: {outcome.strerror}")
    result.bytes_hashed = counter.bytes
    if cache is not None and fresh:
        cache.store(fresh)
    result.records = {rel: result.records[rel] for rel in sorted(result.records)}
    return result

