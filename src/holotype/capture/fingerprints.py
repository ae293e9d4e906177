"""SHA-256 of every byte of the tracked files: parallel, largest first, cached, and wary of files that move."""

from __future__ import annotations

import errno
import os
import subprocess
import sys
import threading
from collections import deque
from dataclasses import dataclass, field
from pathlib import Path
from typing import Protocol

from holotype.capture.digest_cache import DigestCache
from holotype.capture.hashing import (
    Identity,
    Outcome,
    Unstable,
    decode_answer,
    encode_requests,
    hash_stable,
    identity_of,
    sha256_file,
)
from holotype.capture.walk import ProjectFile
from holotype.records import FileRecord


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


def _hash_stable(path: str, counter: _Counter, before: Identity) -> tuple[str, Identity]:
    """Hash, then check the file did not change meanwhile; retry once, then give up loudly."""
    return hash_stable(path, before, lambda p: sha256_file(p, counter))


SMALL = 64 * 1024  # many files up to this size go to worker processes (for them, the per-file work dominates)
PROCESS_MIN_FILES = 4000  # fewer small files than this: threads (a worker process costs some 20 ms to start)
BATCH = 1000


def _run_all(threads: list[threading.Thread], counter: _Counter, done: list[int],
             progress: HashProgress | None) -> None:
    """Start the threads and wait for them, telling the progress display how far they are."""
    for t in threads:
        t.start()
    for t in threads:
        while t.is_alive():
            t.join(timeout=0.1)
            if progress is not None:
                progress.advance(counter.bytes, done[0])


def _hash_in_processes(items: list[tuple[ProjectFile, Identity]], workers: int, counter: _Counter,
                       progress: HashProgress | None) -> list[Outcome]:
    """Many small files: Python's per-file work holds the GIL, so they go to worker processes of their own
    (hashing.py), fed in batches while they answer. Any trouble starting them: OSError, and threads do it."""
    import holotype

    package_home = str(Path(holotype.__file__).resolve().parents[1])
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([package_home, *filter(None, [os.environ.get("PYTHONPATH")])])}
    shares = [items[k::workers] for k in range(workers)]
    procs: list[subprocess.Popen[bytes]] = []
    try:
        for _ in shares:
            procs.append(subprocess.Popen([sys.executable, "-m", "holotype.capture.hashing"], stdin=subprocess.PIPE,
                                          stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, env=env))
    except OSError:
        for proc in procs:  # the one that did start must not wait for requests that never come
            proc.kill()
            proc.wait()
        raise
    answers: list[list[Outcome]] = [[] for _ in shares]
    done = [0]

    def feed(k: int) -> None:
        stdin = procs[k].stdin
        assert stdin is not None
        try:
            for i in range(0, len(shares[k]), BATCH):
                stdin.write(encode_requests((item.path, ident) for item, ident in shares[k][i:i + BATCH]))
                stdin.flush()
        except OSError:
            pass  # the worker is gone: its missing answers say so
        finally:
            stdin.close()

    def read(k: int) -> None:
        stdout = procs[k].stdout
        assert stdout is not None
        for (_, before), line in zip(shares[k], stdout):
            outcome = decode_answer(line, before)
            if isinstance(outcome, tuple):
                counter.add(outcome[1][2])
            answers[k].append(outcome)
            done[0] += 1

    threads = [threading.Thread(target=job, args=(k,), daemon=True) for k in range(len(shares)) for job in (feed, read)]
    try:
        _run_all(threads, counter, done, progress)
    finally:
        for proc in procs:
            if proc.poll() is None:
                proc.kill()
            proc.wait()
    if any(len(a) != len(share) for a, share in zip(answers, shares)):
        raise OSError(errno.EIO, "a digest worker stopped early")
    outcomes: list[Outcome] = [OSError(0, "not hashed")] * len(items)
    for k, share_answers in enumerate(answers):
        outcomes[k::workers] = share_answers
    return outcomes


def _hash_all(items: list[tuple[ProjectFile, Identity]], counter: _Counter, workers: int | None,
              progress: HashProgress | None) -> list[Outcome]:
    """Hash on a few threads that take the next file from a shared queue (linear in the file count); the
    small files go to worker processes when there are many of them."""
    count = max(1, min(workers or os.cpu_count() or 1, len(items)))
    small_from = next((i for i, (_, ident) in enumerate(items) if ident[2] <= SMALL), len(items))
    if count > 1 and len(items) - small_from >= PROCESS_MIN_FILES:  # items come largest first
        own = _Counter()  # added to the total only if the workers finish: else threads hash it all again
        try:
            tail = _hash_in_processes(items[small_from:], count, own, progress)
        except (OSError, RuntimeError, ImportError):
            tail = None  # no worker processes here (a sandbox, say): threads do it all
        if tail is not None:
            counter.add(own.bytes)
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
            except (OSError, Unstable) as exc:
                outcomes[index] = exc
            with lock:
                done[0] += 1

    threads = [threading.Thread(target=work, name=f"holotype-hash-{i}", daemon=True) for i in range(count)]
    try:
        _run_all(threads, counter, done, progress)
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
            elif isinstance(outcome, Unstable):
                result.problems[item.rel] = ("unstable", "kept changing while being read; "
                                             "stop whatever writes it and record again")
            else:
                result.problems[item.rel] = ("unreadable", f"cannot read: {outcome.strerror}")
    result.bytes_hashed = counter.bytes
    if cache is not None and fresh:
        cache.store(fresh)
    result.records = {rel: result.records[rel] for rel in sorted(result.records)}
    return result

