"""Digests remembered by file identity (device, inode, size, mtime_ns, ctime_ns) in the user's cache dir.

Most files have a row of their own. The files of a data folder entry digested by a worker
(folder_digests.py) are remembered as one row per folder entry instead, a packed array of their
identities and digests: one insert per thousand files rather than a thousand, which is most of what a
cache costs a first record. Whoever digests such a folder loads its row first (`preload_folders`), and
`lookup` then answers from it as from the file rows.

An optimisation only: a missing or corrupt cache is rebuilt silently, and entries are never
trusted for files changed in the last moments (their timestamps could still be shared with a
later write in the same clock tick).
"""

from __future__ import annotations

import os
import sqlite3
import stat
import time
from array import array
from collections.abc import Iterable, Sequence
from pathlib import Path

from holotype.capture.hashing import RACY_SECONDS, Identity
from holotype.errors import HolotypeError

_SCHEMA = """CREATE TABLE IF NOT EXISTS digests (
    dev INTEGER NOT NULL, ino INTEGER NOT NULL, size INTEGER NOT NULL,
    mtime_ns INTEGER NOT NULL, ctime_ns INTEGER NOT NULL, sha256 TEXT NOT NULL,
    PRIMARY KEY (dev, ino))"""
# what an interpreter's numeric inspection answered, keyed by what decides it (capture/numerics.py)
_FACTS = "CREATE TABLE IF NOT EXISTS facts (key TEXT PRIMARY KEY, doc TEXT NOT NULL, stored REAL NOT NULL)"
# a folder entry's files: their identities (five int64 each), then their SHA-256 digests (32 bytes each)
_FOLDER_FILES = "CREATE TABLE IF NOT EXISTS folder_files (key TEXT PRIMARY KEY, files BLOB NOT NULL)"
_IDENTITY_BYTES = 5 * 8
_DIGEST_BYTES = 32


def folder_key(real_root: str, folder: str) -> str:
    """The cache's key for what is remembered of data folder entry `folder` of the project at `real_root`."""
    return f"folder:{real_root}\0{folder}"


def pack_files(entries: Sequence[tuple[Identity, str]]) -> bytes:
    """Files' (identity, hex digest) pairs as one folder row."""
    numbers = array("q")
    for ident, _ in entries:
        numbers.extend(ident)
    return numbers.tobytes() + bytes.fromhex("".join(digest for _, digest in entries))


def unpack_files(blob: bytes) -> dict[Identity, str]:
    """The pairs `pack_files` packed; {} for bytes of any other shape."""
    count, rest = divmod(len(blob), _IDENTITY_BYTES + _DIGEST_BYTES)
    if rest:
        return {}
    numbers = array("q")
    numbers.frombytes(blob[:count * _IDENTITY_BYTES])
    text = blob[count * _IDENTITY_BYTES:].hex()
    digests = [text[i:i + 2 * _DIGEST_BYTES] for i in range(0, len(text), 2 * _DIGEST_BYTES)]
    spread = iter(numbers)
    return dict(zip(zip(spread, spread, spread, spread, spread), digests))


def _settled(entries: Sequence[tuple[Identity, str]]) -> list[tuple[Identity, str]]:
    """The entries whose files were last changed long enough ago to be trusted later (RACY_SECONDS)."""
    now_ns = time.time_ns()
    return [(ident, digest) for ident, digest in entries if now_ns - max(ident[3], ident[4]) > RACY_SECONDS * 1e9]


def default_cache_path() -> Path:
    """$HOLOTYPE_CACHE_DIR, else the platform's user cache folder."""
    override = os.environ.get("HOLOTYPE_CACHE_DIR")
    if override:
        return Path(override) / "digests.sqlite3"
    from platformdirs import user_cache_dir

    return Path(user_cache_dir("holotype", appauthor=False)) / "digests.sqlite3"


APPLICATION_ID = 0x486F6C6F  # "Holo": SQLite's header field that names the program owning a database file


class DigestCache:
    """SQLite-backed; safe for concurrent holotype runs (WAL, busy timeout, short transactions)."""

    def __init__(self, path: Path | None = None) -> None:
        self.path = path or default_cache_path()
        self.conn: sqlite3.Connection | None = None
        self._folders: dict[Identity, str] = {}  # what preload_folders loaded
        self._open()

    def _connect(self) -> sqlite3.Connection:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        conn = sqlite3.connect(self.path, timeout=30, isolation_level=None, check_same_thread=False)
        conn.execute("PRAGMA journal_mode=WAL")
        # no fsync per transaction: in WAL mode SQLite documents this as safe from corruption, and a power cut
        # can only lose the last digests remembered (the cache is an optimisation; they are hashed again)
        conn.execute("PRAGMA synchronous=NORMAL")
        conn.execute(_SCHEMA)
        conn.execute(_FACTS)
        conn.execute(_FOLDER_FILES)
        conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
        conn.execute("SELECT count(*) FROM digests WHERE dev = -1").fetchone()
        return conn

    def _ours(self) -> bool | None:
        """True: holotype wrote this file (its SQLite application id says so); None: no file yet; False: not ours."""
        try:
            st = os.lstat(self.path)
        except FileNotFoundError:
            return None
        except OSError:
            return False
        if not stat.S_ISREG(st.st_mode):
            return False
        try:
            with open(self.path, "rb") as fh:
                header = fh.read(100)
        except OSError:
            return False
        if not header:
            return None  # empty (another holotype is creating it this moment): nothing to lose
        if len(header) < 100 or not header.startswith(b"SQLite format 3\x00"):
            return False
        app_id = int.from_bytes(header[68:72], "big")
        if app_id == APPLICATION_ID:
            return True
        # holotype 0.1 wrote no application id: a database holding exactly its table is still ours
        return app_id == 0 and self._has_only_our_table()

    def _has_only_our_table(self) -> bool:
        try:
            conn = sqlite3.connect(f"file:{self.path}?mode=ro", uri=True, timeout=5)
            try:
                names = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            finally:
                conn.close()
        except sqlite3.DatabaseError:
            return False
        return names <= {"digests", "facts", "folder_files"} and "digests" in names

    def _open(self) -> None:
        ours = self._ours()
        if ours is False:
            raise HolotypeError("is not holotype's digest cache (a file of another program, or one holotype cannot "
                                "prove it wrote); holotype never replaces it. Point HOLOTYPE_CACHE_DIR at a folder "
                                "of holotype's own, or move the file", self.path)
        try:
            self.conn = self._connect()
            return
        except (sqlite3.DatabaseError, OSError):
            pass
        for suffix in ("", "-wal", "-shm"):  # ours but corrupt: start again
            try:
                Path(str(self.path) + suffix).unlink()
            except OSError:
                pass
        try:
            self.conn = self._connect()
        except (sqlite3.DatabaseError, OSError):
            self.conn = None  # no cache this time; hashing still works

    def lookup(self, identities: list[Identity]) -> dict[Identity, str]:
        """Known digests for these file identities."""
        if self.conn is None or not identities:
            return {}
        wanted = set(identities)
        found: dict[Identity, str] = {}
        if self._folders:
            loaded = self._folders
            found = {ident: loaded[ident] for ident in wanted if ident in loaded}
            if len(found) == len(wanted):
                return found
        try:
            by_dev: dict[int, list[int]] = {}
            for ident in identities:
                if ident not in found:
                    by_dev.setdefault(ident[0], []).append(ident[1])
            for dev, inodes in by_dev.items():
                for start in range(0, len(inodes), 900):
                    chunk = inodes[start:start + 900]
                    marks = ",".join("?" * len(chunk))
                    rows = self.conn.execute(
                        f"SELECT dev, ino, size, mtime_ns, ctime_ns, sha256 FROM digests "
                        f"WHERE dev = ? AND ino IN ({marks})", (dev, *chunk)).fetchall()
                    for row in rows:
                        key = (row[0], row[1], row[2], row[3], row[4])
                        if key in wanted:
                            found[key] = row[5]
        except sqlite3.DatabaseError:
            return found
        return found

    def preload_folders(self, keys: Iterable[str], below: str | None = None) -> None:
        """Load the files remembered for folder entries `keys` (`folder_key`), and with `below` for every entry
        whose key starts with it, so that `lookup` answers from them."""
        if self.conn is None:
            return
        keys = list(keys)
        try:
            blobs = []
            for start in range(0, len(keys), 900):
                chunk = keys[start:start + 900]
                blobs += [row[0] for row in self.conn.execute(
                    f"SELECT files FROM folder_files WHERE key IN ({','.join('?' * len(chunk))})", chunk)]
            if below:
                # keys are text: those starting with `below` sort from it to just before its last code point + 1
                end = below[:-1] + chr(ord(below[-1]) + 1)
                blobs += [row[0] for row in self.conn.execute(
                    "SELECT files FROM folder_files WHERE key >= ? AND key < ?", (below, end))]
        except sqlite3.DatabaseError:
            return
        for blob in blobs:
            if isinstance(blob, bytes):
                self._folders.update(unpack_files(blob))

    def remember_folders(self, items: Sequence[tuple[str, Sequence[tuple[Identity, str]]]]) -> None:
        """Remember each folder entry's files (key, (identity, digest) pairs) in one row, replacing what was
        remembered for it; files touched too recently to be trusted later are left out."""
        if self.conn is None or not items:
            return
        rows = [(key, pack_files(_settled(entries))) for key, entries in items]
        self._write_many("INSERT OR REPLACE INTO folder_files (key, files) VALUES (?, ?)", rows)

    def store(self, entries: list[tuple[Identity, str]]) -> None:
        """Remember digests, skipping files touched too recently to be trusted later."""
        if self.conn is None or not entries:
            return
        safe = [(*ident, digest) for ident, digest in _settled(entries)]
        if safe:
            self._write_many("INSERT OR REPLACE INTO digests VALUES (?, ?, ?, ?, ?, ?)", safe)

    def _write_many(self, sql: str, rows: Sequence[tuple[object, ...]]) -> None:
        """Many rows in one short transaction (a failed write only loses the speed-up)."""
        assert self.conn is not None
        try:
            self.conn.execute("BEGIN IMMEDIATE")
            self.conn.executemany(sql, rows)
            self.conn.execute("COMMIT")
        except sqlite3.DatabaseError:
            try:
                self.conn.execute("ROLLBACK")
            except sqlite3.DatabaseError:
                pass

    def fact(self, key: str) -> str | None:
        """A remembered answer for `key` (see capture/numerics.py), or None."""
        if self.conn is None:
            return None
        try:
            row = self.conn.execute("SELECT doc FROM facts WHERE key = ?", (key,)).fetchone()
        except sqlite3.DatabaseError:
            return None
        return None if row is None else str(row[0])

    def facts(self, keys: list[str]) -> dict[str, str]:
        """Remembered answers for many keys at once."""
        if self.conn is None or not keys:
            return {}
        found: dict[str, str] = {}
        try:
            for start in range(0, len(keys), 900):
                chunk = keys[start:start + 900]
                rows = self.conn.execute(f"SELECT key, doc FROM facts WHERE key IN ({','.join('?' * len(chunk))})",
                                         chunk).fetchall()
                found.update((str(k), str(d)) for k, d in rows)
        except sqlite3.DatabaseError:
            return {}
        return found

    def remember_many(self, items: list[tuple[str, str]]) -> None:
        """Remember many answers in one transaction."""
        if self.conn is None or not items:
            return
        now = time.time()
        self._write_many("INSERT OR REPLACE INTO facts (key, doc, stored) VALUES (?, ?, ?)",
                         [(k, d, now) for k, d in items])

    def remember(self, key: str, doc: str) -> None:
        if self.conn is None:
            return
        try:
            self.conn.execute("INSERT OR REPLACE INTO facts (key, doc, stored) VALUES (?, ?, ?)",
                              (key, doc, time.time()))
        except sqlite3.DatabaseError:
            pass

    def close(self) -> None:
        if self.conn is not None:
            self.conn.close()
            self.conn = None
