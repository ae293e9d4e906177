"""PEP 751 pylock.toml for the locked packages, validated by packaging's own reader before it is written."""

from __future__ import annotations

import hashlib
import os
from pathlib import Path
from typing import Any

from holotype.errors import HolotypeError
from holotype.phrasing import listed
from holotype.records import LockContents, PackageRecord
from holotype.safe_files import open_regular
from holotype.standards.requirements import is_relative, local_folder
from holotype.standards.wheel_cache import is_recorded_wheel


def _files_for(pkg: PackageRecord, folders: list[Path]) -> list[Path]:
    from packaging.utils import canonicalize_name, parse_sdist_filename, parse_wheel_filename

    found: list[Path] = []
    names: set[str] = set()
    for folder in folders:
        for path in sorted(folder.iterdir()) if folder.is_dir() else []:
            if path.name in names:
                continue  # the same file in two folders (a wheelhouse and the cache)
            try:
                if path.suffix == ".whl":
                    if not is_recorded_wheel(pkg, path.name):  # only the build that was installed
                        continue
                    name, version, _, _ = parse_wheel_filename(path.name)
                elif path.name.endswith(".tar.gz"):
                    name, version = parse_sdist_filename(path.name)
                else:
                    continue
            except ValueError:
                continue
            if name == canonicalize_name(pkg.name) and str(version) == pkg.version:
                found.append(path)
                names.add(path.name)
    return found


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open_regular(path, follow=True, what="the wheel") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _relative(path: Path, root: Path) -> str:
    """A path as PEP 751 wants it, relative to the lock file's folder (the project): never absolute."""
    return Path(os.path.relpath(Path(path).resolve(), Path(root).resolve())).as_posix()


def pylock_dict(lock: LockContents, find_links: list[Path], root: Path | None = None) -> dict[str, Any]:
    """A PEP 751 document. Index packages need their files' hashes, found in `find_links` folders.

    Every path in it is relative to the project folder (where pylock.toml belongs): no absolute path of
    this machine is written."""
    root = Path(root or ".")
    packages: list[dict[str, Any]] = []
    unhashed: list[str] = []
    for name in sorted(lock.packages):
        pkg = lock.packages[name]
        entry: dict[str, Any] = {"name": name, "version": pkg.version}
        o = pkg.origin
        if o.kind == "vcs" and o.url and o.commit:
            entry["vcs"] = {k: v for k, v in {"type": o.vcs, "url": o.url, "commit-id": o.commit,
                                              "requested-revision": o.requested_revision,
                                              "subdirectory": o.subdirectory}.items() if v}
        elif o.kind in ("directory", "editable") and o.url:
            entry["directory"] = {"path": _relative(local_folder(o.url, root), root), "editable": o.kind == "editable"}
        elif o.kind == "archive" and o.url and o.archive_hash and "=" in o.archive_hash:
            algo, digest = o.archive_hash.split("=", 1)
            entry["archive"] = {"url": o.url, "hashes": {algo: digest}} if not o.url.startswith("file:") and not \
                is_relative(o.url) else {"path": _relative(local_folder(o.url, root), root), "hashes": {algo: digest}}
        else:
            files = _files_for(pkg, find_links)
            wheels = [p for p in files if p.suffix == ".whl"]
            sdists = [p for p in files if p.suffix != ".whl"]
            if not files:
                unhashed.append(f"{name} {pkg.version}")
                continue
            if wheels:
                entry["wheels"] = [{"name": p.name, "path": _relative(p, root), "hashes": {"sha256": _sha256(p)}}
                                   for p in wheels]
            if sdists:
                entry["sdist"] = {"name": sdists[0].name, "path": _relative(sdists[0], root),
                                  "hashes": {"sha256": _sha256(sdists[0])}}
        packages.append(entry)
    if unhashed:
        shown = listed(unhashed, 3)
        raise HolotypeError(f"pylock.toml needs a file hash for each index package, and none was found for {shown}; "
                            "pass --find-links DIR holding their wheels (for example from 'pip download --no-deps "
                            "-d DIR -r requirements.txt'), or run 'holotype recreate' once, which keeps the wheels it "
                            "fetches in holotype's wheel cache, where pins looks too")
    return {"lock-version": "1.0", "created-by": "holotype",
            "requires-python": f"=={lock.interpreter.version}", "packages": packages}


def export_pylock(lock: LockContents, find_links: list[Path], root: Path | None = None) -> str:
    import tomli_w
    from packaging.pylock import Pylock, PylockValidationError

    doc = pylock_dict(lock, find_links, root)
    try:
        Pylock.from_dict(doc)  # PEP 751's reference reader must accept what we write
    except PylockValidationError as exc:
        raise HolotypeError(f"cannot express this lock as pylock.toml: {exc}") from None
    return tomli_w.dumps(doc)
