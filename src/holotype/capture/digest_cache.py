"""Digests remembered by file identity (device, inode, size, mtime_ns, ctime_ns) in the user's cache dir.

An optimisation only: a missing or corrupt cache is rebuilt silently, and entries are never
trusted for files changed in the last moments (their timestamps could still be shared with a
later write in the same clock tick).
"""

from __future__ import annotations

import os
import sqlite3
import stat
import time
from collections.abc import Sequence
from pathlib import Path

from holotype.capture.hashing import RACY_SECONDS, Identity
from holotype.errors import HolotypeError

_SCHEMA = """CREATE TABLE IF NOT EXISTS digests (
    dev INTEGER NOT NULL, ino INTEGER NOT NULL, size INTEGER NOT NULL,
    mtime_ns INTEGER NOT NULL, ctime_ns INTEGER NOT NULL, sha256 TEXT NOT NULL,
    PRIMARY KEY (dev, ino))"""
# what an interpreter's numeric inspection answered, keyed by what decides it (capture/numerics.py)
_FACTS = "CREATE TABLE IF NOT EXISTS facts (key TEXT PRIMARY KEY, doc TEXT NOT NULL, stored REAL NOT NULL)"


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
        return names <= {"digests", "facts"} and "digests" in names

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
        try:
            by_dev: dict[int, list[int]] = {}
            for ident in identities:
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
            return {}
        return found

    def store(self, entries: list[tuple[Identity, str]]) -> None:
        """Remember digests, skipping files touched too recently to be trusted later."""
        if self.conn is None or not entries:
            return
        now_ns = time.time_ns()
        safe = [(*ident, digest) for ident, digest in entries
                if now_ns - max(ident[3], ident[4]) > RACY_SECONDS * 1e9]
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
