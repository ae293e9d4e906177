"""SHA-256 of one file, read safely; and the worker that digests many small files in another process.

Standard library only, because `python -m holotype.capture.hashing` is that worker: fingerprints.py
starts one per core and feeds it NUL-separated (path, identity) pairs on standard input; it answers one
line per file, in order. Its own process, not a multiprocessing pool: a pool started by forkserver or
spawn imports the caller's main module again in every worker, which runs the top of a user's script
that calls holotype's Python API a second time.
"""

from __future__ import annotations

import errno
import hashlib
import os
import stat
import sys
import threading
import time
from array import array
from collections.abc import Callable, Iterable, Sequence
from typing import BinaryIO, Protocol

RACY_SECONDS = 2.0  # a file changed this recently may still share its timestamps with its next write


def identities_digest(names: list[str], numbers: array[int], width: int) -> str:
    """One SHA-256 over files' names (in a fixed order) and their identity numbers, `width` per file, the
    mtime and ctime (in ns) at positions 3 and 4; "" when a file changed too recently to be trusted."""
    newest = max(max(numbers[3::width], default=0), max(numbers[4::width], default=0))
    if time.time_ns() - newest < RACY_SECONDS * 1e9:
        return ""
    h = hashlib.sha256("\0".join(names).encode("utf-8", "surrogateescape"))
    h.update(numbers.tobytes())
    return h.hexdigest()

CHUNK = 1 << 20  # hashlib releases the GIL for updates this large, so threads really run in parallel

Identity = tuple[int, int, int, int, int]  # (device, inode, size, mtime_ns, ctime_ns): digest_cache.py's key


class ByteCounter(Protocol):
    def add(self, n: int) -> None: ...


def identity_of(st: os.stat_result) -> Identity:
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)


_buffers = threading.local()


def _buffer() -> bytearray:
    # one reusable buffer per thread: allocating 1 MiB per file dominates when files are small
    buf = getattr(_buffers, "buf", None)
    if buf is None:
        buf = _buffers.buf = bytearray(CHUNK)
    return buf


_OPEN_FLAGS = (os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0)
               | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0))


def sha256_file(path: str | bytes | os.PathLike[str], counter: ByteCounter | None = None) -> str:
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


class Unstable(Exception):
    """The file kept changing while it was read."""


def hash_stable(path: str | bytes, before: Identity, digest: Callable[[str | bytes], str]) -> tuple[str, Identity]:
    """Hash, then check the file did not change meanwhile; retry once, then give up loudly."""
    for attempt in range(2):
        if attempt:
            before = identity_of(os.stat(path))
        found = digest(path)
        after = identity_of(os.stat(path))
        if (before[2], before[3]) == (after[2], after[3]):
            return found, after
    raise Unstable()


def _read_into(fd: int, view: memoryview) -> int:
    if _READV:
        return os.readv(fd, [view])
    data = os.read(fd, len(view))  # no readv (Windows): a read and a copy
    view[:len(data)] = data
    return len(data)


_READV = hasattr(os, "readv")


def digest_walked(path: str | bytes, before: Identity, buf: bytearray,
                  dir_fd: int | None = None) -> tuple[str, Identity]:
    """`hash_stable` for a file the walk has just stat-ed, with the fewest system calls: open, one read into
    `buf` (a file smaller than it), fstat, close. As `sha256_file`, it opens without following a link and
    refuses (OSError) what is not a regular file; Unstable when the file kept changing while it was read.
    With `dir_fd`, `path` is relative to that open folder."""
    view = memoryview(buf)
    for _ in range(2):
        fd = os.open(path, _OPEN_FLAGS, dir_fd=dir_fd)
        try:
            size = before[2]
            n = -1
            if size < len(buf):  # small: one read of one byte more than the walk saw says whether that was all
                n = _read_into(fd, view[:size + 1])
                h = hashlib.sha256(view[:n])
            st = os.fstat(fd)
            if not stat.S_ISREG(st.st_mode):
                raise OSError(errno.EINVAL, "not a regular file (a link, pipe or device took its place)")
            if n == -1 or n > size:  # big, or it grew: read on to the end
                if n == -1:
                    h = hashlib.sha256()
                while True:
                    n = _read_into(fd, view)
                    if not n:
                        break
                    h.update(view[:n])
                st = os.fstat(fd)
        finally:
            os.close(fd)
        after = identity_of(st)
        if (before[2], before[3]) == (after[2], after[3]):
            return h.hexdigest(), after
        before = after
    raise Unstable()


def digest_rows(where: int | str, cut: int, rows: Sequence[tuple[str, int, int, int, int, int]],
                known: dict[Identity, str],
                buf: bytearray) -> tuple[list[str], list[Identity], list[tuple[Identity, str]]]:
    """`digest_walked` for the files of one folder the walk has just stat-ed, given as (path, identity) rows
    whose paths name the folder in their first `cut` characters; `where` is the open folder's descriptor
    (or its path). Returns their digests (from `known` where it has their identity), their identities as
    read (the walk's for a known one), and the (identity, digest) pairs of those hashed now. The loop is
    written out for the common case, a small file read at once and still as the walk saw it (one `os.read`
    of a byte more than the walk saw: a bytes object costs less than slicing `buf` for each file); anything
    else goes through `digest_walked`, whose errors it raises."""
    limit = len(buf)
    dir_fd = where if isinstance(where, int) else None
    prefix = "" if dir_fd is not None else os.path.join(str(where), "")
    digests: list[str] = []
    idents: list[Identity] = []
    fresh: list[tuple[Identity, str]] = []
    flags, sha256, fstat, close, is_regular, read = (_OPEN_FLAGS, hashlib.sha256, os.fstat, os.close, stat.S_ISREG,
                                                    os.read)
    for row in rows:
        ident: Identity = row[1:]  # (dev, ino, size, mtime_ns, ctime_ns)
        digest = known.get(ident) if known else None
        if digest is None:
            size = row[3]
            if size < limit:
                fd = os.open(prefix + row[0][cut:], flags, dir_fd=dir_fd)
                try:
                    data = read(fd, size + 1)
                    st = fstat(fd)
                finally:
                    close(fd)
                if len(data) == size and st.st_size == size and st.st_mtime_ns == row[4] and is_regular(st.st_mode):
                    digest = sha256(data).hexdigest()
                    ident = (st.st_dev, st.st_ino, size, st.st_mtime_ns, st.st_ctime_ns)
            if digest is None:  # big, or not as the walk saw it
                digest, ident = digest_walked(prefix + row[0][cut:], ident, buf, dir_fd)
            fresh.append((ident, digest))
        digests.append(digest)
        idents.append(ident)
    return digests, idents, fresh


Outcome = tuple[str, Identity] | OSError | Unstable


def encode_requests(items: Iterable[tuple[str, Identity]]) -> bytes:
    """What the worker reads: path NUL identity NUL, for each file."""
    return b"".join(os.fsencode(path) + b"\0" + " ".join(map(str, ident)).encode() + b"\0" for path, ident in items)


def decode_answer(line: bytes, before: Identity) -> Outcome:
    """One answer line: '=' digest (identity as walked), '+' digest and the new identity, '!' errno and
    message, '~' (unstable)."""
    mark, rest = line[:1], line[1:].rstrip(b"\n")
    if mark == b"=":
        return rest.decode(), before
    if mark == b"+":
        digest, *numbers = rest.decode().split()
        a, b, c, d, e = (int(n) for n in numbers)
        return digest, (a, b, c, d, e)
    if mark == b"!":
        code, _, text = rest.decode("utf-8", "replace").partition(" ")
        return OSError(int(code), text)
    if mark == b"~":
        return Unstable()
    return OSError(errno.EIO, "the digest worker gave no answer")


def serve(source: BinaryIO, sink: BinaryIO) -> None:
    """The worker: answer each request of `source` on `sink`, in order, as requests arrive."""
    pending = b""
    buf = bytearray(CHUNK)
    while True:
        block = source.read(1 << 16)
        if not block:
            break
        fields = (pending + block).split(b"\0")
        pending = b"\0".join(fields[-2:]) if len(fields) % 2 == 0 else fields[-1]
        usable = fields[:-2] if len(fields) % 2 == 0 else fields[:-1]
        out = []
        for i in range(0, len(usable) - 1, 2):
            path = usable[i]
            a, b, c, d, e = (int(n) for n in usable[i + 1].split())
            before = (a, b, c, d, e)
            try:
                found, after = digest_walked(path, before, buf)
                out.append(b"=" + found.encode() + b"\n" if after == before else
                           b"+" + found.encode() + b" " + " ".join(map(str, after)).encode() + b"\n")
            except Unstable:
                out.append(b"~\n")
            except OSError as exc:
                text = (exc.strerror or "error").replace("\n", " ")
                out.append(f"!{exc.errno or 0} {text}\n".encode())
        sink.write(b"".join(out))
        sink.flush()


if __name__ == "__main__":
    serve(sys.stdin.buffer, sys.stdout.buffer)
