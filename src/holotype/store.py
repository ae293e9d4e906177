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
import math
import os
import time
import zlib
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any, BinaryIO

from holotype.atomic import remove_stale_temps, write_atomic
from holotype.errors import BaselineError, HolotypeError, InputError
from holotype.safe_files import open_regular
from holotype.schema import HEX

STORE_FOLDER = ".holotype"
BASELINE_FOLDER = "baselines"
LOG_FOLDER = "logs"
LAST_REPLAY = "last-replay.json"
BUSY_NAME = "busy"
GITIGNORE = ("# holotype: the baselines are committed; logs, the busy marker and the last replay are not\n"
             f"{BUSY_NAME}\n{LOG_FOLDER}/\n{LAST_REPLAY}\n")
DEFAULT_WAIT = 120.0


MAX_WAIT = 7 * 86400.0
MAX_BASELINE_BYTES = 4 << 30  # when the lock gives no size: the most one object may decompress to


def _wait_limit() -> float:
    """HOLOTYPE_LOCK_TIMEOUT: seconds to wait for another writer, 0 to a week."""
    text = os.environ.get("HOLOTYPE_LOCK_TIMEOUT")
    if text is None:
        return DEFAULT_WAIT
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (0 <= value <= MAX_WAIT):  # also catches nan and inf
        raise HolotypeError(f"HOLOTYPE_LOCK_TIMEOUT={text[:40]!r} should be seconds from 0 to {MAX_WAIT:.0f} "
                            "(a week)")
    return value


def refuse_link(path: Path, what: str) -> None:
    """holotype's own folders and files must not be symbolic links: writing through one could leave the project."""
    if os.path.islink(path):
        raise HolotypeError(f"is a symbolic link; holotype keeps its {what} only in the project itself (remove the "
                            "link)", path)


class BaselineStore:
    """The content-addressed baseline objects under .holotype/baselines/."""

    def __init__(self, root: Path) -> None:
        self.folder = Path(root) / STORE_FOLDER / BASELINE_FOLDER

    def path_for(self, digest: str) -> Path:
        if len(digest) != 64 or not set(digest) <= HEX:
            raise BaselineError(f"'{digest[:80]}' is not a SHA-256 digest, so it names no baseline")
        return self.folder / digest[:2] / f"{digest[2:]}.gz"

    def has(self, digest: str) -> bool:
        return self.path_for(digest).is_file()

    def _check_links(self, path: Path) -> None:
        for folder in (self.folder.parent, self.folder, path.parent):
            refuse_link(folder, "baselines")

    def put(self, data: bytes, level: int = 6) -> str:
        """Store `data` (if not already there, compressed at gzip `level`) and return its SHA-256."""
        digest = hashlib.sha256(data).hexdigest()
        target = self.path_for(digest)
        self._check_links(target)
        if not target.exists():
            # mtime=0 keeps the compressed bytes identical for identical outputs
            write_atomic(target, gzip.compress(data, compresslevel=level, mtime=0))
        return digest

    def get(self, digest: str, size: int | None = None) -> bytes:
        """The original bytes for `digest`, verified. At most `size` bytes (the recorded size) are
        decompressed, so a damaged or planted object cannot fill the memory."""
        path = self.path_for(digest)
        self._check_links(path)
        limit = size if size is not None else MAX_BASELINE_BYTES
        try:
            with open_regular(path) as fh:
                data = _inflate(fh, limit, path)
        except FileNotFoundError:
            raise BaselineError(f"baseline {digest[:12]}… is missing from {self.folder}") from None
        except InputError as exc:
            if "no such file" in exc.detail:
                raise BaselineError(f"baseline {digest[:12]}… is missing from {self.folder}") from None
            raise BaselineError(f"baseline {path} cannot be read: {exc.detail}") from None
        if hashlib.sha256(data).hexdigest() != digest:
            raise BaselineError(f"baseline {path} does not match its SHA-256 (damaged or edited)")
        return data

    def objects(self) -> dict[str, Path]:
        """Every object in the store, by digest."""
        found: dict[str, Path] = {}
        if not self.folder.is_dir() or os.path.islink(self.folder):
            return found
        for sub in sorted(self.folder.iterdir()):
            if len(sub.name) != 2 or not sub.is_dir() or sub.is_symlink():
                continue
            for obj in sorted(sub.glob("*.gz")):
                digest = sub.name + obj.name[: -len(".gz")]
                if len(digest) == 64 and set(digest) <= HEX and not obj.is_symlink():
                    found[digest] = obj
        return found

    def unreferenced(self, referenced: set[str]) -> dict[str, Path]:
        return {d: p for d, p in self.objects().items() if d not in referenced}

    def clean_temps(self) -> None:
        if self.folder.is_dir():
            for sub in self.folder.iterdir():
                if sub.is_dir():
                    remove_stale_temps(sub)


def _inflate(fh: BinaryIO, limit: int, path: Path) -> bytes:
    """gzip-decompress a stream, refusing to produce more than `limit` bytes."""
    inflater = zlib.decompressobj(wbits=31)
    out = bytearray()
    try:
        while True:
            chunk = fh.read(1 << 20)
            if not chunk:
                break
            out += inflater.decompress(chunk, limit + 1 - len(out))
            while inflater.unconsumed_tail and len(out) <= limit:
                out += inflater.decompress(inflater.unconsumed_tail, limit + 1 - len(out))
            if len(out) > limit:
                raise BaselineError(f"baseline {path} does not decompress within its recorded {limit:,} bytes "
                                    "(damaged or planted); refused")
            if inflater.eof:
                break
        if not inflater.eof:
            raise BaselineError(f"baseline {path} does not decompress (truncated)")
        if inflater.unused_data or fh.read(1):  # holotype writes one gzip member; more was planted or damaged
            raise BaselineError(f"baseline {path} does not decompress to one object (data after its end)")
    except zlib.error as exc:
        raise BaselineError(f"baseline {path} does not decompress ({exc})") from None
    return bytes(out)


class ProjectStore:
    """Everything holotype keeps in `.holotype/`: baselines, logs, the last replay, the writer's turn."""

    def __init__(self, root: Path) -> None:
        self.root = Path(root)
        self.folder = self.root / STORE_FOLDER
        self.baselines = BaselineStore(self.root)

    def prepare(self) -> None:
        """Create the folder with its .gitignore and clear temp files a killed run left behind."""
        refuse_link(self.folder, "records")
        self.folder.mkdir(exist_ok=True)
        for sub in (BASELINE_FOLDER, LOG_FOLDER, BUSY_NAME, LAST_REPLAY, ".gitignore"):
            refuse_link(self.folder / sub, "records")
        ignore = self.folder / ".gitignore"
        if not ignore.exists():
            write_atomic(ignore, GITIGNORE)
        remove_stale_temps(self.root)
        self.baselines.clean_temps()

    def log_path(self, name: str, suffix: str = "") -> Path:
        folder = self.folder / LOG_FOLDER
        refuse_link(self.folder, "records")
        refuse_link(folder, "logs")
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / f"{name}{suffix}.log"
        refuse_link(path, "logs")
        return path

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
        refuse_link(self.folder, "records")
        self.folder.mkdir(parents=True, exist_ok=True)
        path = self.folder / BUSY_NAME
        limit = _wait_limit() if timeout is None else timeout
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0), 0o644)
        except OSError as exc:
            raise HolotypeError(f"cannot open the busy marker: {exc.strerror} (a symbolic link is refused)",
                                path) from None
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
