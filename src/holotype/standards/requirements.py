"""requirements.txt lines (PEP 508 direct references, PEP 440 exact pins) for the locked packages."""

from __future__ import annotations

import os
from pathlib import Path

from holotype import __version__
from holotype.records import LockContents, PackageRecord


def is_relative(url: str) -> bool:
    """Whether a lock URL is a path relative to the project (`.`, `./x`, `../x`)."""
    return url == "." or url.startswith(("./", "../"))


def local_url(url: str, root: Path | None = None) -> str:
    """A lock URL as a URL of this machine: a project-relative path resolved against `root` (the project),
    the lock's `file://~/` shorthand expanded; other URLs unchanged."""
    if is_relative(url):
        return (Path(root or ".") / url).resolve().as_uri()
    if url.startswith("file://~/"):
        return "file://" + os.path.expanduser("~/") + url[len("file://~/"):]
    return url


def local_folder(url: str, root: Path | None = None) -> Path:
    """The folder of a local directory or editable install on this machine."""
    from urllib.parse import unquote, urlsplit

    return Path(unquote(urlsplit(local_url(url, root)).path))


def requirement_line(pkg: PackageRecord, root: Path | None = None) -> str:
    """One pinned requirement (PEP 508 / PEP 440 exact pin, or a direct reference for non-index origins)."""
    o = pkg.origin
    if o.kind == "vcs" and o.url and o.commit:
        sub = f"#subdirectory={o.subdirectory}" if o.subdirectory else ""
        return f"{pkg.name} @ {o.vcs}+{local_url(o.url, root)}@{o.commit}{sub}"
    if o.kind == "archive" and o.url:
        frag = f"#{o.archive_hash}" if o.archive_hash and "#" not in o.url else ""
        return f"{pkg.name} @ {local_url(o.url, root)}{frag}"
    if o.kind in ("directory", "editable") and o.url:
        return f"{pkg.name} @ {local_url(o.url, root)}"
    return f"{pkg.name}=={pkg.version}"


def export_requirements(lock: LockContents, root: Path | None = None) -> str:
    lines = [f"# Exact pins exported by holotype {__version__} from holotype.lock (recorded {lock.recorded}),",
             f"# Python {lock.interpreter.version} on {lock.platform.system} {lock.platform.machine}."]
    lines += [requirement_line(lock.packages[name], root) for name in sorted(lock.packages)]
    return "\n".join(lines) + "\n"
