"""requirements.txt lines (PEP 508 direct references, PEP 440 exact pins) for the locked packages."""

from __future__ import annotations

import os

from holotype import __version__
from holotype.records import LockContents, PackageRecord


def expand_home(url: str) -> str:
    """Undo the lock's file://~/ shorthand for the machine exporting it."""
    if url.startswith("file://~/"):
        return "file://" + os.path.expanduser("~/") + url[len("file://~/"):]
    return url


def requirement_line(pkg: PackageRecord) -> str:
    """One pinned requirement (PEP 508 / PEP 440 ===-free exact pin, or a direct reference for non-index origins)."""
    o = pkg.origin
    if o.kind == "vcs" and o.url and o.commit:
        sub = f"#subdirectory={o.subdirectory}" if o.subdirectory else ""
        return f"{pkg.name} @ {o.vcs}+{o.url}@{o.commit}{sub}"
    if o.kind == "archive" and o.url:
        frag = f"#{o.archive_hash}" if o.archive_hash and "#" not in o.url else ""
        return f"{pkg.name} @ {o.url}{frag}"
    if o.kind in ("directory", "editable") and o.url:
        return f"{pkg.name} @ {expand_home(o.url)}"
    return f"{pkg.name}=={pkg.version}"


def export_requirements(lock: LockContents) -> str:
    lines = [f"# Exact pins exported by holotype {__version__} from holotype.lock (recorded {lock.recorded}),",
             f"# Python {lock.interpreter.version} on {lock.platform.system} {lock.platform.machine}."]
    lines += [requirement_line(lock.packages[name]) for name in sorted(lock.packages)]
    return "\n".join(lines) + "\n"
