"""Digest the data files, big folders as one entry each (manifests.py), and skip the unchanged ones by stat.

A folder entry's *stamp* is one SHA-256 over the identities (device, inode, size, times) of its files, from
the walk's own lstat. When the stamp equals the one remembered with the folder's listing digest the last
time, no file in it changed by stat, so neither the digest cache is asked about its files nor any listing
compared. The stamp is not trusted for a folder with a file changed in the last moments (the racy-timestamp
rule of digest_cache.py).
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from array import array
from dataclasses import dataclass, field
from itertools import chain

from holotype.capture.digest_cache import RACY_SECONDS, DigestCache
from holotype.capture.fingerprints import FingerprintResult, HashProgress, fingerprint_files
from holotype.capture.walk import ProjectFile
from holotype.manifests import choose_folders, folder_of, folder_record
from holotype.records import FileRecord, FolderRecord


@dataclass
class DataResult(FingerprintResult):
    """The data files: `records` holds those listed one by one, `folders` the folder entries; the files of a
    folder are in `folder_files` (and its listing bytes in `listings`) wherever they were digested."""

    folders: dict[str, FolderRecord] = field(default_factory=dict)
    folder_files: dict[str, dict[str, FileRecord]] = field(default_factory=dict)
    listings: dict[str, bytes] = field(default_factory=dict)


def _link_identity(item: ProjectFile) -> tuple[tuple[int, int, int, int, int], str]:
    """A link's own lstat and its text: pointing a link elsewhere makes it anew, and changes both."""
    try:
        st = os.lstat(item.path)
        return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns), os.readlink(item.path)
    except OSError:
        return (-1, -1, -1, -1, -1), "\0"  # unreadable now: the stamp cannot match a remembered one


def _stamp(files: list[ProjectFile]) -> str:
    """One digest of the files' paths and identities; "" when one changed too recently to trust its times."""
    names = [f.rel for f in files]
    idents = [f.ident for f in files]
    for i, f in enumerate(files):
        if f.is_link or f.ident is None:
            idents[i], text = _link_identity(f)
            names[i] = f"{f.rel}\0{text}"
    numbers = array("q", chain.from_iterable(idents))  # type: ignore[arg-type]
    newest = max(max(numbers[3::5], default=0), max(numbers[4::5], default=0))
    if time.time_ns() - newest < RACY_SECONDS * 1e9:
        return ""
    h = hashlib.sha256("\0".join(names).encode("utf-8", "surrogateescape"))
    h.update(numbers.tobytes())
    return h.hexdigest()


def fingerprint_data(files: dict[str, ProjectFile], root: str, *, cache: DigestCache | None,
                     recorded: dict[str, FolderRecord] | None = None, progress: HashProgress | None = None,
                     listings: bool = False) -> DataResult:
    """Digest the data files. With `recorded` (check, replay), a folder whose stamp is remembered with the
    recorded listing is taken as unchanged without reading anything more; with `listings` (record), every
    folder's listing bytes are built for the store."""
    chosen = choose_folders(files)
    groups: dict[str, list[ProjectFile]] = {f: [] for f in chosen}
    loose: dict[str, ProjectFile] = {}
    entry_of: dict[str, str | None] = {}
    for rel, item in files.items():
        parent = rel.rpartition("/")[0]
        folder = entry_of.get(parent, "")
        if folder == "":
            folder = entry_of[parent] = folder_of(rel, chosen)
        if folder is None:
            loose[rel] = item
        else:
            groups[folder].append(item)
    real = os.path.realpath(root)
    keys = {folder: f"folder:{real}\0{folder}" for folder in chosen}
    stamps = {folder: _stamp(items) for folder, items in groups.items()} if cache is not None else {}
    known = cache.facts([keys[f] for f in chosen if stamps.get(f)]) if cache is not None else {}
    out = DataResult()
    to_digest = dict(loose)
    for folder, items in groups.items():
        doc = known.get(keys[folder])
        if doc is not None and not listings:
            try:
                got = json.loads(doc)
                if got["stamp"] == stamps[folder] and (recorded or {}).get(folder, FolderRecord()).listing \
                        == got["listing"]:
                    out.folders[folder] = FolderRecord(folder, int(got["files"]), int(got["bytes"]),
                                                       str(got["listing"]))
                    continue
            except (ValueError, KeyError, TypeError):
                pass
        to_digest.update((f.rel, f) for f in items)
    digests = fingerprint_files(dict(sorted(to_digest.items())), cache=cache, progress=progress)
    out.problems = digests.problems
    out.files_hashed, out.bytes_hashed, out.cache_hits = digests.files_hashed, digests.bytes_hashed, digests.cache_hits
    per_folder: dict[str, dict[str, FileRecord]] = {}
    for rel, rec in digests.records.items():
        parent = rel.rpartition("/")[0]
        folder = entry_of[parent] if parent in entry_of else folder_of(rel, chosen)
        if folder is None:
            out.records[rel] = rec
        else:
            per_folder.setdefault(folder, {})[rel] = rec
    remember: list[tuple[str, str]] = []
    for folder in sorted(set(groups) - set(out.folders)):
        records = per_folder.get(folder, {})
        entry, raw = folder_record(folder, records)
        out.folders[folder] = entry
        out.folder_files[folder] = records
        if listings:
            out.listings[folder] = raw
        clean = not any(folder_of(p, chosen) == folder for p in digests.problems)
        if cache is not None and stamps.get(folder) and clean:
            remember.append((keys[folder], json.dumps({"stamp": stamps[folder], "listing": entry.listing,
                                                       "files": entry.files, "bytes": entry.bytes})))
    if cache is not None and remember:
        cache.remember_many(remember)
    out.folders = dict(sorted(out.folders.items()))
    return out
