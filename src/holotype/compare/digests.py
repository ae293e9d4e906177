"""Recorded file digests against the files found now: modified, missing, added, renamed, changed type."""

from __future__ import annotations

from holotype.findings import Finding
from holotype.records import FileRecord


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
