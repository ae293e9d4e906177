"""One writer at a time per project: commands that write the lock or baselines hold .holotype/busy."""

from __future__ import annotations

import os
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from holotype.baselines import STORE_FOLDER
from holotype.errors import HolotypeError

BUSY_NAME = "busy"


def _timeout() -> float:
    try:
        return float(os.environ.get("HOLOTYPE_LOCK_TIMEOUT", "120"))
    except ValueError:
        return 120.0


@contextmanager
def project_lock(root: Path, timeout: float | None = None) -> Iterator[None]:
    """Wait (up to `timeout` seconds) for other holotype writers in this project to finish."""
    try:
        import fcntl
    except ImportError:  # no advisory locks on this platform: run unguarded
        yield
        return
    folder = Path(root) / STORE_FOLDER
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / BUSY_NAME
    limit = _timeout() if timeout is None else timeout
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        deadline = time.monotonic() + limit
        while True:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    raise HolotypeError(f"another holotype command is still writing this project; waited {limit:g}s "
                                        "(set HOLOTYPE_LOCK_TIMEOUT to wait longer)", path) from None
                time.sleep(0.05)
        try:
            yield
        finally:
            fcntl.flock(fd, fcntl.LOCK_UN)
    finally:
        os.close(fd)
