"""Big data folders in the lock: which folders are listed as one entry, and the listing object's format.

A project with few data files lists each one in holotype.lock (a one-file change is a one-line diff). A
folder that holds at least `FOLDER_THRESHOLD` files is recorded as one `[data_folders."…"]` entry: its file
count, total size and the SHA-256 of its listing. The listing itself (path, size, SHA-256 of every file) is
an object in the baseline store, content-addressed by that same SHA-256, so the lock stays small and is
read fast, and the store can still name every file that changed.

Which folders: deepest first, a folder becomes an entry when it and its subfolders hold at least
`FOLDER_THRESHOLD` files not already in a deeper entry. A file belongs to the deepest entry above it.
The rule depends only on the paths, so record and check group the same tree the same way.

Listing format (uncompressed; the store gzips it): the line `holotype listing 1\\n`, then one record per
file in path order, each of four fields ended by NUL: kind (`f` file, `l` symbolic link), SHA-256 (or the
link's text), size in decimal, project-relative path. NUL is the one byte no path or link text can hold;
splitting on it parses a listing of 100,000 files in milliseconds.
"""

from __future__ import annotations

import hashlib
from collections import Counter
from collections.abc import Iterable

from holotype.errors import LockfileError
from holotype.records import FileRecord, FolderRecord

FOLDER_THRESHOLD = 1000  # files; below it a folder's files are listed one by one in the lock
MAGIC = b"holotype listing 1\n"
# gzip level of a listing object in the store: mostly hex digests, which level 6 packs only 4% smaller, at
# two and a half times the time (100,000 files: 10 MB of listing)
LISTING_LEVEL = 1
MAX_LISTING_BYTES = 1 << 31  # 2 GiB of listing is some 10 million files: more is not a listing holotype wrote


def parent_of(rel: str) -> str:
    return rel.rpartition("/")[0]


def ancestors_of(rel: str) -> list[str]:
    """The folders holding `rel` (project-relative), nearest first; the project's top level is not one."""
    out: list[str] = []
    folder = parent_of(rel)
    while folder:
        out.append(folder)
        folder = parent_of(folder)
    return out


def choose_folders(paths: Iterable[str], threshold: int = FOLDER_THRESHOLD) -> set[str]:
    """The folders (project-relative) to record as one entry each; the project's top level never is one."""
    direct = Counter(rel.rpartition("/")[0] for rel in paths)
    pending = dict(direct)
    # every ancestor of a folder with files takes part, so counts can flow up through empty levels
    for folder in list(direct):
        while folder:
            folder = parent_of(folder)
            pending.setdefault(folder, 0)
    chosen: set[str] = set()
    for folder in sorted(pending, key=lambda f: f.count("/") + (1 if f else 0), reverse=True):
        if folder and pending[folder] >= threshold:
            chosen.add(folder)
        elif folder:
            up = parent_of(folder)
            pending[up] += pending[folder]
    return chosen


def folder_of(rel: str, chosen: set[str]) -> str | None:
    """The deepest chosen folder holding `rel`, or None when it is listed on its own."""
    if not chosen:
        return None
    folder = parent_of(rel)
    while folder:
        if folder in chosen:
            return folder
        folder = parent_of(folder)
    return None


def file_entry(rel: str, sha256: str, size: int) -> bytes:
    """One regular file's record in a listing object."""
    return b"f\0%s\0%d\0%s\0" % (sha256.encode("ascii"), size, rel.encode("utf-8", "surrogateescape"))


def encode_listing(records: dict[str, FileRecord]) -> bytes:
    """The listing object's bytes for these records (sorted by path, so equal sets give equal bytes)."""
    parts = [MAGIC]
    for rel in sorted(records):
        rec = records[rel]
        if rec.kind == "symlink":
            target = (rec.target or "").encode("utf-8", "surrogateescape")
            parts.append(b"\0".join((b"l", target, b"0", rel.encode("utf-8", "surrogateescape"))) + b"\0")
        else:
            parts.append(file_entry(rel, rec.sha256 or "", rec.size))
    return b"".join(parts)


def folder_record(folder: str, records: dict[str, FileRecord]) -> tuple[FolderRecord, bytes]:
    """The lock entry for `folder` holding `records`, and its listing object's bytes."""
    raw = encode_listing(records)
    total = sum(r.size for r in records.values() if r.kind == "file")
    return FolderRecord(folder, len(records), total, hashlib.sha256(raw).hexdigest()), raw


def decode_listing(raw: bytes, folder: str, where: str) -> dict[str, FileRecord]:
    """The records of a listing object; anything not exactly as holotype writes it is a LockfileError."""
    def bad(why: str) -> LockfileError:
        return LockfileError(f"the listing of data folder '{folder}' ({where}) {why}; the lock cannot be judged "
                             "without it (restore .holotype/baselines from version control, or record again)")

    if not raw.startswith(MAGIC):
        raise bad("is not a holotype listing")
    fields = raw[len(MAGIC):].split(b"\0")
    if fields[-1] != b"" or (len(fields) - 1) % 4:
        raise bad("is truncated")
    out: dict[str, FileRecord] = {}
    prefix = folder + "/"
    try:
        for i in range(0, len(fields) - 1, 4):
            kind, value, size, path = fields[i:i + 4]
            rel = path.decode("utf-8", "surrogateescape")
            if not rel.startswith(prefix):
                raise bad(f"names '{rel[:200]}', which is not inside the folder")
            if kind == b"f":
                digest = value.decode("ascii")
                if len(digest) != 64:
                    raise bad(f"holds a malformed digest for '{rel[:200]}'")
                out[rel] = FileRecord(rel, "file", int(size), digest)
            elif kind == b"l":
                out[rel] = FileRecord(rel, "symlink", target=value.decode("utf-8", "surrogateescape"))
            else:
                raise bad(f"holds an unknown entry kind for '{rel[:200]}'")
    except (ValueError, UnicodeDecodeError):
        raise bad("holds a malformed entry") from None
    return out
