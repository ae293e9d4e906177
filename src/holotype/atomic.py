"""Every file holotype writes goes through here: a reader sees the old file or the new one, never half."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from holotype.errors import WriteError

TEMP_PREFIX = ".holotype-tmp-"


def _read_umask() -> int:
    """The process's umask. Reading it means setting it, so it is read once, when this module is imported
    (before any of holotype's threads run): toggling it while other threads create files would give theirs
    the wrong mode."""
    umask = os.umask(0)
    os.umask(umask)
    return umask


UMASK = _read_umask()


def _fsync_folder(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # some platforms cannot open folders; the rename is still atomic
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def write_atomic(path: Path, data: bytes | str, *, mode: int | None = None) -> None:
    """Write `data` to `path` by temp file in the same folder, flush, fsync, rename, fsync folder.

    Any failure (disk full, a read-only folder) leaves the old file and raises WriteError naming `path`."""
    try:
        _write_atomic(Path(path), data, mode)
    except OSError as exc:
        if isinstance(exc, WriteError):
            raise
        raise WriteError(f"cannot write: {exc.strerror or exc}", path) from None


def _write_atomic(path: Path, data: bytes | str, mode: int | None) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    payload = data.encode("utf-8") if isinstance(data, str) else data
    fd, tmp_name = tempfile.mkstemp(prefix=TEMP_PREFIX, dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(payload)
            fh.flush()
            os.fsync(fh.fileno())
        if mode is not None:
            os.chmod(tmp_name, mode)
        elif path.exists():
            os.chmod(tmp_name, path.stat().st_mode & 0o7777)
        else:
            os.chmod(tmp_name, 0o666 & ~UMASK)
        os.replace(tmp_name, path)
    except BaseException:
        try:
            os.unlink(tmp_name)
        except OSError:
            pass
        raise
    _fsync_folder(path.parent)


def remove_stale_temps(folder: Path) -> int:
    """Delete temp files a killed run left behind in `folder`; return how many."""
    removed = 0
    try:
        entries = list(Path(folder).glob(TEMP_PREFIX + "*"))
    except OSError:
        return 0
    for entry in entries:
        try:
            entry.unlink()
            removed += 1
        except OSError:
            pass
    return removed
