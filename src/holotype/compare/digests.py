"""Recorded file digests against the files found now: modified, missing, added, renamed, changed type."""

from __future__ import annotations

from pathlib import Path

from holotype.errors import BaselineError, LockfileError
from holotype.findings import Finding
from holotype.lockfile import LOCK_NAME
from holotype.manifests import MAX_LISTING_BYTES, decode_listing
from holotype.records import FileRecord, FolderRecord
from holotype.store import BASELINE_FOLDER, STORE_FOLDER, BaselineStore


def _size_text(n: int) -> str:
    return f"{n:,} bytes"


def compare_file_sets(area: str, old: dict[str, FileRecord], new: dict[str, FileRecord],
                      problems: dict[str, tuple[str, str]] | None = None) -> list[Finding]:
    """Findings for one tracked set (`area` is "data" or "code")."""
    problems = problems or {}
    out: list[Finding] = []
    missing = [p for p in old if p not in new and p not in problems]
    added = [p for p in new if p not in old]
    # a rename is one finding: the same digest gone from one path and present at another
    by_digest: dict[str, list[str]] = {}
    for p in added:
        rec = new[p]
        if rec.kind == "file" and rec.sha256:
            by_digest.setdefault(rec.sha256, []).append(p)
    renamed: set[str] = set()
    for p in sorted(missing):
        rec = old[p]
        candidates = by_digest.get(rec.sha256 or "", [])
        if rec.kind == "file" and candidates:
            target = candidates.pop(0)
            renamed.update((p, target))
            out.append(Finding(area, p, f"{area}.renamed", f"renamed to {target} (same content)", p, target))
    for p in sorted(missing):
        if p in renamed:
            continue
        inside = [q for q in added if q.startswith(p + "/")]
        if inside:
            renamed.update(inside)  # reported here, not again as added files
            out.append(Finding(area, p, f"{area}.changed", f"was a file, now a folder holding {len(inside)} file(s)",
                               "file", "folder"))
        else:
            out.append(Finding(area, p, f"{area}.missing", "missing (recorded, not found)", old[p].sha256, None))
    for p in sorted(problems):
        kind, message = problems[p]
        out.append(Finding(area, p, f"{area}.{kind}", message, old[p].sha256 if p in old else None, None))
    for p in sorted(set(old) & set(new)):
        a, b = old[p], new[p]
        if a.kind != b.kind:
            what = {"file": "a file", "symlink": "a symbolic link"}
            out.append(Finding(area, p, f"{area}.changed", f"was {what[a.kind]}, now {what[b.kind]}",
                               a.kind, b.kind))
        elif a.kind == "symlink" and a.target != b.target:
            out.append(Finding(area, p, f"{area}.changed", f"link now points to {b.target} (was {a.target})",
                               a.target, b.target))
        elif a.kind == "file" and a.sha256 != b.sha256:
            size = f"size {_size_text(a.size)} → {_size_text(b.size)}" if a.size != b.size \
                else f"same size ({_size_text(a.size)}), different bytes"
            out.append(Finding(area, p, f"{area}.changed", f"modified: {size}", a.sha256, b.sha256))
    for p in sorted(added):
        if p not in renamed:
            out.append(Finding(area, p, f"{area}.added", "new file inside a tracked location", None, new[p].sha256))
    return out


def recorded_listing(store: BaselineStore, folder: str, rec: FolderRecord) -> dict[str, FileRecord]:
    """The files of a recorded data folder, from its listing object; LockfileError when it cannot be read."""
    where = f"object {rec.listing[:12]}… in {STORE_FOLDER}/{BASELINE_FOLDER}"
    try:
        raw = store.get(rec.listing, MAX_LISTING_BYTES)
    except BaselineError as exc:
        detail = "is missing" if "missing" in exc.detail else f"cannot be used ({exc.detail})"
        raise LockfileError(f"the listing of data folder '{folder}' ({where}) {detail}; the lock cannot be judged "
                            "without it (restore .holotype/baselines from version control, or record again)",
                            Path(LOCK_NAME)) from None
    files = decode_listing(raw, folder, where)
    if len(files) != rec.files:
        raise LockfileError(f"the listing of data folder '{folder}' ({where}) holds {len(files):,} files, the lock "
                            f"says {rec.files:,}", Path(LOCK_NAME))
    return files


def compare_data(store: BaselineStore, old_files: dict[str, FileRecord], old_folders: dict[str, FolderRecord],
                 new_files: dict[str, FileRecord], new_folders: dict[str, FolderRecord],
                 new_folder_files: dict[str, dict[str, FileRecord]],
                 problems: dict[str, tuple[str, str]] | None = None, area: str = "data") -> list[Finding]:
    """Findings for the data, folder entries included: a folder with the same listing on both sides is equal
    without opening anything; every other one is compared file by file, so findings name the files (and are
    the same whichever side lists a folder as one entry)."""
    old, new = dict(old_files), dict(new_files)
    for folder in sorted(set(old_folders) | set(new_folders)):
        a, b = old_folders.get(folder), new_folders.get(folder)
        if a is not None and b is not None and a.listing == b.listing:
            continue
        if a is not None:
            old.update(recorded_listing(store, folder, a))
        if b is not None:
            new.update(new_folder_files.get(folder, {}))
    return compare_file_sets(area, old, new, problems)


def missing_listings(store: BaselineStore, folders: dict[str, FolderRecord]) -> list[Finding]:
    """A data folder whose listing object is not in the store: the lock is incomplete (was .holotype/ committed?)."""
    return [Finding("data", folder + "/", "data.listing",
                    f"its listing ({rec.files:,} files) {rec.listing[:12]}… is missing from "
                    f"{STORE_FOLDER}/{BASELINE_FOLDER} (was .holotype/ committed?); a change inside it could not be "
                    "named file by file", rec.listing, None)
            for folder, rec in sorted(folders.items()) if not store.has(rec.listing)]


def as_entries(files: dict[str, FileRecord], folders: dict[str, FolderRecord]) -> dict[str, FileRecord]:
    """Files and folder entries in one mapping, a folder standing as `folder/` with its listing digest (for
    summaries that need not name each file: a diff of two locks, candidate causes)."""
    out = dict(files)
    out.update({f + "/": FileRecord(f + "/", "file", rec.bytes, rec.listing) for f, rec in folders.items()})
    return out
