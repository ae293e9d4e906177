"""Digest the data files, big folders as one entry each (manifests.py), and skip the unchanged ones by stat.

A folder entry's *stamp* (folder_stamps.py) is one SHA-256 over the identities of its files. When the stamp
equals the one remembered with the folder's listing digest the last time, no file in it changed by stat, so
neither the digest cache is asked about its files nor any listing compared. A folder taken as unchanged
before the walk (`settled`: its stamp was taken by a worker) is not walked by this process at all.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field

from holotype.capture.digest_cache import DigestCache, folder_key
from holotype.capture.fingerprints import FingerprintResult, HashProgress, fingerprint_files
from holotype.capture.folder_digests import Answer
from holotype.capture.folder_stamps import stamp
from holotype.capture.walk import ProjectFile
from holotype.manifests import ancestors_of, choose_folders, decode_listing, folder_of, folder_record
from holotype.records import FileRecord, FolderRecord


@dataclass
class DataResult(FingerprintResult):
    """The data files: `records` holds those listed one by one, `folders` the folder entries; the files of a
    folder are in `folder_files` (and its listing bytes in `listings`) wherever they were digested."""

    folders: dict[str, FolderRecord] = field(default_factory=dict)
    folder_files: dict[str, dict[str, FileRecord]] = field(default_factory=dict)
    listings: dict[str, bytes] = field(default_factory=dict)

    def every_folder_file(self) -> dict[str, dict[str, FileRecord]]:
        """`folder_files`, with those of the folders digested whole by a worker (only their listing holds them)."""
        out = dict(self.folder_files)
        for folder, raw in self.listings.items():
            if folder not in out:
                out[folder] = decode_listing(raw, folder, "just made")
        return out


def remembered_stamps(root: str, cache: DigestCache, recorded: dict[str, FolderRecord],
                      folders: list[str] | None = None) -> dict[str, tuple[str, FolderRecord]]:
    """For each recorded folder (or each of `folders`) whose stamp is remembered beside the recorded listing:
    that stamp, and the folder's entry as it was then."""
    real = os.path.realpath(root)
    wanted = [f for f in (folders if folders is not None else recorded) if f in recorded]
    out: dict[str, tuple[str, FolderRecord]] = {}
    keys = [folder_key(real, f) for f in wanted]
    docs = cache.facts(keys)
    for folder, key in zip(wanted, keys):
        doc = docs.get(key)
        if doc is None:
            continue
        try:
            got = json.loads(doc)
            if got["stamp"] and got["listing"] == recorded[folder].listing:
                out[folder] = (str(got["stamp"]), FolderRecord(folder, int(got["files"]), int(got["bytes"]),
                                                              str(got["listing"])))
        except (ValueError, KeyError, TypeError):
            continue
    return out


def fingerprint_data(files: dict[str, ProjectFile], root: str, *, cache: DigestCache | None,
                     recorded: dict[str, FolderRecord] | None = None, progress: HashProgress | None = None,
                     listings: bool = False, settled: dict[str, FolderRecord] | None = None,
                     digested: list[Answer] | None = None) -> DataResult:
    """Digest the data files. With `recorded` (check, replay), a folder whose stamp is remembered with the
    recorded listing is taken as unchanged without reading anything more; with `listings` (record), every
    folder's listing bytes are built for the store. `settled` folders were found unchanged by stat before the
    walk, which left their files out of `files`; the folder entries of `digested` were made by workers
    (folder_digests.py), whose leftover files are in `files`."""
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
    keys = {folder: folder_key(real, folder) for folder in chosen}
    stamps = {folder: stamp(items) for folder, items in groups.items()} if cache is not None else {}
    known = remembered_stamps(root, cache, recorded or {}, [f for f in chosen if stamps.get(f)]) \
        if cache is not None and not listings else {}
    out = DataResult()
    to_digest = dict(loose)
    out.folders.update(settled or {})
    for folder, items in groups.items():
        if folder in known and known[folder][0] == stamps[folder]:
            out.folders[folder] = known[folder][1]
            continue
        to_digest.update((f.rel, f) for f in items)
    if cache is not None and to_digest:
        # a worker remembered the files of a folder entry in one row (digest_cache.py): load those of the
        # entries digested here, and of every folder above a file listed on its own (it may have been in one)
        entries = {folder for folder in groups if folder not in out.folders and groups[folder]}
        above = {folder for rel in loose for folder in ancestors_of(rel)}
        cache.preload_folders(folder_key(real, folder) for folder in sorted(entries | above))
    digests = fingerprint_files(dict(sorted(to_digest.items())), cache=cache, progress=progress)
    out.problems = digests.problems
    out.files_hashed, out.bytes_hashed, out.cache_hits = digests.files_hashed, digests.bytes_hashed, digests.cache_hits
    remember: list[tuple[str, str]] = []
    for answer in digested or ():
        out.files_hashed += answer.hashed
        out.bytes_hashed += answer.bytes_hashed
        out.cache_hits += answer.hits
        for entry, raw, folder_stamp in answer.folders:
            out.folders[entry.path] = entry
            if listings:
                out.listings[entry.path] = raw
            if cache is not None and folder_stamp:
                remember.append((folder_key(real, entry.path), json.dumps({
                    "stamp": folder_stamp, "listing": entry.listing, "files": entry.files, "bytes": entry.bytes})))
    per_folder: dict[str, dict[str, FileRecord]] = {}
    for rel, rec in digests.records.items():
        parent = rel.rpartition("/")[0]
        folder = entry_of[parent] if parent in entry_of else folder_of(rel, chosen)
        if folder is None:
            out.records[rel] = rec
        else:
            per_folder.setdefault(folder, {})[rel] = rec
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
