"""`holotype tidy [--remove]`: baseline objects no longer referenced by holotype.lock, listed, then removed."""

from __future__ import annotations

from pathlib import Path

from holotype.findings import Finding, Judgement
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.records import stored_objects
from holotype.store import ProjectStore


def tidy_store(root: Path, *, remove: bool = False) -> Judgement:
    """List (or with `remove`, delete) the objects of .holotype/baselines/ that the lock does not reference.

    Older locks in version control may still name them: they stay in the repository's history."""
    root = Path(root)
    store = ProjectStore(root)
    with store.one_writer():
        lock = read_lock(root / LOCK_NAME)
        referenced = stored_objects(lock)
        stale = store.baselines.unreferenced(referenced)
        findings = []
        freed = 0
        for digest, path in sorted(stale.items()):
            size = path.stat().st_size
            freed += size
            if remove:
                path.unlink()
                try:
                    path.parent.rmdir()
                except OSError:
                    pass  # other objects share the folder
            findings.append(Finding("lockfile", f"baseline {digest[:12]}…", "lockfile.note",
                                    f"{'removed' if remove else 'not referenced by ' + LOCK_NAME} ({size:,} bytes)",
                                    digest, None))
    kept = len(referenced)
    verb = "removed" if remove else "can be removed with 'holotype tidy --remove'"
    note = (f"{len(stale)} unreferenced baseline object(s), {freed:,} bytes: {verb}; {kept} referenced kept"
            if stale else f"no unreferenced baseline objects; {kept} referenced")
    return Judgement("tidy", apply_policy(findings), notes=(note,))
