"""The one owner of the project's `.holotype/` folder.

Layout (documented in docs/lockfile.md):

    .holotype/
      .gitignore          written here: everything below except baselines/ stays out of version control
      baselines/ab/cdef….gz   recorded outputs, content-addressed by SHA-256, gzip-compressed (committed)
      logs/NAME.log       the latest run of each analysis (not committed)
      last-replay.json    the latest replay's findings and the digests of the outputs it saw (not committed)
      busy                one writer at a time (not committed)

An object's name is the SHA-256 of the original bytes; reading verifies it, so a damaged object is
reported instead of silently compared.
"""

from __future__ import annotations

import gzip
import hashlib
import json
import os
import time
import zlib
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from holotype.atomic import remove_stale_temps, write_atomic
from holotype.errors import BaselineError, HolotypeError

STORE_FOLDER = ".holotype"
BASELINE_FOLDER = "baselines"
LOG_FOLDER = "logs"
LAST_REPLAY = "last-replay.json"
BUSY_NAME = "busy"
GITIGNORE = ("# holotype: the baselines are committed; logs, the busy marker and the last replay are not\n"
             f"{BUSY_NAME}\n{LOG_FOLDER}/\n{LAST_REPLAY}\n")
DEFAULT_WAIT = 120.0


def _wait_limit() -> float:
    try:
        return float(os.environ.get("HOLOTYPE_LOCK_TIMEOUT", str(DEFAULT_WAIT)))
    except ValueError:
        return DEFAULT_WAIT


class BaselineStore:
    """The content-addressed baseline objects under .holotype/baselines/."""

    def __init__(self, root: Path) -> None:
        self.folder = Path(root) / STORE_FOLDER / BASELINE_FOLDER

    def path_for(self, digest: str) -> Path:
        return self.folder / digest[:2] / f"{digest[2:]}.gz"

    def has(self, digest: str) -> bool:
        return self.path_for(digest).is_file()

    def put(self, data: bytes) -> str:
        """Store `data` (if not already there) and return its SHA-256."""
        digest = hashlib.sha256(data).hexdigest()
        target = self.path_for(digest)
        if not target.exists():
            # mtime=0 keeps the compressed bytes identical for identical outputs
            write_atomic(target, gzip.compress(data, compresslevel=6, mtime=0))
        return digest

    def get(self, digest: str) -> bytes:
        """The original bytes for `digest`, verified."""
        path = self.path_for(digest)
        try:
            packed = path.read_bytes()
        except FileNotFoundError:
            raise BaselineError(f"baseline {digest[:12]}… is missing from {self.folder}") from None
        except OSError as exc:
            raise BaselineError(f"baseline {path} cannot be read: {exc.strerror}") from None
        try:
            data = gzip.decompress(packed)
        except (OSError, EOFError, zlib.error) as exc:
            raise BaselineError(f"baseline {path} does not decompress ({exc})") from None
        if hashlib.sha256(data).hexdigest() != digest:
            raise BaselineError(f"baseline {path} does not match its SHA-256 (damaged or edited)")
        return data

    def clean_temps(self) -> None:
        if self.folder.is_dir():
            for sub in self.folder.iterdir():
                if sub.is_dir():
                    remove_stale_temps(sub)


class ProjectStore:
    """Everything holotype keeps in `.holotype/`: baselines, logs, the last replay, the writer's turn."""

    def __init__(self, root: Path) -> None:
        self.root = Path(root)
        self.folder = self.root / STORE_FOLDER
        self.baselines = BaselineStore(self.root)

    def prepare(self) -> None:
        """Create the folder with its .gitignore and clear temp files a killed run left behind."""
        self.folder.mkdir(exist_ok=True)
        ignore = self.folder / ".gitignore"
        if not ignore.exists():
            write_atomic(ignore, GITIGNORE)
        remove_stale_temps(self.root)
        self.baselines.clean_temps()

    def log_path(self, name: str, suffix: str = "") -> Path:
        folder = self.folder / LOG_FOLDER
        folder.mkdir(parents=True, exist_ok=True)
        return folder / f"{name}{suffix}.log"

    def save_last_replay(self, doc: dict[str, Any]) -> None:
        write_atomic(self.folder / LAST_REPLAY, json.dumps(doc, indent=1, default=str))

    def last_replay(self) -> dict[str, Any]:
        """The latest replay's record, or {} when there is none (or it cannot be read)."""
        try:
            doc = json.loads((self.folder / LAST_REPLAY).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return {}
        return doc if isinstance(doc, dict) else {}

    @contextmanager
    def one_writer(self, timeout: float | None = None) -> Iterator[None]:
        """Wait (up to `timeout` seconds) for other holotype writers in this project to finish."""
        try:
            import fcntl
        except ImportError:  # no advisory locks on this platform: run unguarded
            yield
            return
        self.folder.mkdir(parents=True, exist_ok=True)
        path = self.folder / BUSY_NAME
        limit = _wait_limit() if timeout is None else timeout
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            deadline = time.monotonic() + limit
            while True:
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                    break
                except BlockingIOError:
                    if time.monotonic() >= deadline:
                        raise HolotypeError(f"another holotype command is still writing this project; waited "
                                            f"{limit:g}s (set HOLOTYPE_LOCK_TIMEOUT to wait longer)", path) from None
                    time.sleep(0.05)
            try:
                yield
            finally:
                fcntl.flock(fd, fcntl.LOCK_UN)
        finally:
            os.close(fd)
