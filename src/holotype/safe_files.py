"""Opening user-controlled paths without surprises: no hangs on FIFOs, no devices, no links followed.

Every read of a path that should be a regular file goes through `open_regular`: it opens with
`O_NOFOLLOW | O_NONBLOCK` (a FIFO with no writer cannot block the open, a symbolic link as the
last component is refused), checks the open descriptor with `fstat`, and refuses anything that
is not a regular file in one line naming the path. `read_input` additionally accepts a pipe that
is already open (`<(zcat baseline)`), read once and bounded. Writes to a path the user named
(`--output`) go through `write_output`: a device or FIFO is written into, never replaced.
"""

from __future__ import annotations

import errno
import os
import stat
from pathlib import Path
from typing import BinaryIO

from holotype.atomic import write_atomic
from holotype.errors import InputError

NOFOLLOW = getattr(os, "O_NOFOLLOW", 0)
NONBLOCK = getattr(os, "O_NONBLOCK", 0)
CLOEXEC = getattr(os, "O_CLOEXEC", 0)
BINARY = getattr(os, "O_BINARY", 0)
PIPE_LIMIT = 1 << 30  # the most holotype keeps from a pipe given as a file (1 GiB)


def _kind(mode: int) -> str:
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISCHR(mode):
        return "a character device"
    if stat.S_ISBLK(mode):
        return "a block device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def _open_fd(path: Path | str, *, follow: bool) -> int:
    flags = os.O_RDONLY | NONBLOCK | CLOEXEC | BINARY | (0 if follow else NOFOLLOW)
    try:
        fd = os.open(path, flags)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise InputError("is a symbolic link; holotype does not follow it here", path) from None
        if exc.errno == errno.ENOENT:
            raise InputError("no such file", path) from None
        raise InputError(f"cannot read: {exc.strerror}", path) from None
    return fd


def _blocking(fd: int) -> None:
    if NONBLOCK:
        import fcntl

        fcntl.fcntl(fd, fcntl.F_SETFL, fcntl.fcntl(fd, fcntl.F_GETFL) & ~NONBLOCK)


def open_regular(path: Path | str, *, follow: bool = False, what: str = "") -> BinaryIO:
    """A binary reader for `path`, which must be a regular file (a link as last component is refused)."""
    fd = _open_fd(path, follow=follow)
    try:
        mode = os.fstat(fd).st_mode
        if not stat.S_ISREG(mode):
            raise InputError(f"{what + ' ' if what else ''}is {_kind(mode)}, not a regular file; refused", path)
        _blocking(fd)
        return os.fdopen(fd, "rb")
    except BaseException:
        os.close(fd)
        raise


def read_regular(path: Path | str, *, limit: int | None = None, follow: bool = False, what: str = "") -> bytes:
    """The bytes of the regular file at `path`, refusing one larger than `limit`."""
    with open_regular(path, follow=follow, what=what) as fh:
        if limit is not None:
            size = os.fstat(fh.fileno()).st_size
            if size > limit:
                raise InputError(f"{size:,} bytes is more than holotype reads here ({limit:,})", path)
            data = fh.read(limit + 1)
            if len(data) > limit:
                raise InputError(f"grew past {limit:,} bytes while being read", path)
            return data
        return fh.read()


def read_input(path: Path | str, *, limit: int = PIPE_LIMIT) -> bytes | None:
    """For files named on the command line: None for a regular file (read it by path), the bytes of a pipe
    (read once, at most `limit`), and a one-line refusal for devices, sockets and folders."""
    fd = _open_fd(path, follow=True)
    try:
        mode = os.fstat(fd).st_mode
        if stat.S_ISREG(mode):
            return None
        if not stat.S_ISFIFO(mode):
            raise InputError(f"is {_kind(mode)}; compare reads regular files and pipes", path)
        _blocking(fd)  # a FIFO with no writer reads as empty instead of blocking
        chunks: list[bytes] = []
        total = 0
        while True:
            chunk = os.read(fd, 1 << 20)
            if not chunk:
                if not total:
                    raise InputError("the pipe gave no data (no process writes to it)", path)
                return b"".join(chunks)
            total += len(chunk)
            if total > limit:
                raise InputError(f"the pipe gave more than {limit:,} bytes; save it to a file first", path)
            chunks.append(chunk)
    finally:
        os.close(fd)


def write_output(path: Path | str, data: bytes | str) -> None:
    """Write a file the user named: a regular file atomically; a device or FIFO by writing into it (never
    replacing it); a folder or socket is refused. Disk full and similar name the file."""
    payload = data.encode("utf-8") if isinstance(data, str) else data
    try:
        mode = os.stat(path).st_mode
    except FileNotFoundError:
        mode = 0
    except OSError as exc:
        raise InputError(f"cannot write: {exc.strerror}", path) from None
    if mode and stat.S_ISDIR(mode):
        raise InputError("is a folder; name a file to write", path)
    if mode and (stat.S_ISCHR(mode) or stat.S_ISFIFO(mode)):
        try:
            fd = os.open(path, os.O_WRONLY | CLOEXEC | (NONBLOCK if stat.S_ISFIFO(mode) else 0))
        except OSError as exc:
            reason = "no process is reading this pipe" if exc.errno == errno.ENXIO else exc.strerror
            raise InputError(f"cannot write: {reason}", path) from None
        try:
            _blocking(fd)
            view = memoryview(payload)
            while view:
                view = view[os.write(fd, view):]
        except OSError as exc:
            raise InputError(f"cannot write: {exc.strerror}", path) from None
        finally:
            os.close(fd)
        return
    if mode and not stat.S_ISREG(mode):
        raise InputError(f"is {_kind(mode)}; refused", path)
    write_atomic(Path(path), payload)


def inside(root: Path | str, path: Path | str) -> bool:
    """Whether `path`, with every link resolved, lies inside `root`."""
    real_root = os.path.realpath(root)
    return os.path.commonpath([real_root, os.path.realpath(path)]) == real_root
