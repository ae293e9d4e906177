"""The contents of installed packages: every file an installer wrote, and the source trees of local installs.

Installers list each file they wrote, with its SHA-256, in the distribution's RECORD (PEP 376, PEP 627;
hashes as in the wheel spec: urlsafe base64 without padding). holotype digests the files RECORD lists,
through the same stat cache as the project's own files (`check --full` bypasses it), and keeps per package
one digest of the contents as found (`files`) and the files that already differed from RECORD (`edited`).
A file edited later changes `files` and, compared with RECORD, is named.

Left out, because they legitimately differ between two installs of the same wheel: bytecode, the
installer's own marks (RECORD, INSTALLER, REQUESTED, direct_url.json) and scripts written outside the
package folder (their first line names the interpreter).

Editable and local-folder installs are also digested at their source folder, file by file (`tree`):
for an editable install that is the code the analysis imports.
"""

from __future__ import annotations

import ast
import base64
import binascii
import csv
import dataclasses
import hashlib
import json
import os
import re
import time
from array import array
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import NamedTuple

from holotype.capture.digest_cache import DigestCache
from holotype.capture.fingerprints import fingerprint_files
from holotype.capture.hashing import RACY_SECONDS, identities_digest
from holotype.capture.walk import ProjectFile, ProjectWalker, is_excluded
from holotype.errors import HolotypeError
from holotype.records import Environment, FileRecord, PackageRecord
from holotype.safe_files import read_regular
from holotype.standards.requirements import local_folder

RECORD_LIMIT = 64 << 20  # a RECORD larger than this is not an installer's listing
TREE_LIMIT = 20_000  # files in one local source folder; a larger folder is not digested (and the lock says so)
INSTALLER_MARKS = frozenset({"RECORD", "INSTALLER", "REQUESTED", "direct_url.json", "RECORD.jws", "RECORD.p7s"})
MISSING = (-1, -1, -1, -1, -1, -1)  # the identity numbers of a listed file that is not there
TREE_SKIP = ("*.pyc", "*.pyo", "*.egg-info", "build", "dist", ".eggs")


class Listed(NamedTuple):
    """One file RECORD lists: its path under the site folder and the digest the installer wrote."""

    rel: str
    recorded: str  # as in RECORD: "sha256=<urlsafe base64>", another algorithm, or empty

    @property
    def sha256(self) -> str | None:
        """The installer's SHA-256 in hex; None for another algorithm or none."""
        return _hex(self.recorded[7:]) if self.recorded.startswith("sha256=") else None


@dataclass
class InstalledFiles:
    """What was found for one package: the contents digest, files that differ from RECORD, the source tree."""

    files: str | None = None
    edited: tuple[str, ...] = ()
    tree: dict[str, FileRecord] = field(default_factory=dict)
    tree_note: str | None = None


def _hex(encoded: str) -> str | None:
    """A RECORD digest (urlsafe base64 without padding) as hex; None when it is not a SHA-256."""
    try:
        raw = base64.urlsafe_b64decode(encoded + "=" * (-len(encoded) % 4))
    except (binascii.Error, ValueError):
        return None
    return raw.hex() if len(raw) == 32 else None


def _kept(rel: str) -> bool:
    if not rel or rel[0] == "/" or "../" in rel or rel.startswith("..") or (len(rel) > 1 and rel[1] == ":"):
        return False  # outside the site folder: scripts, headers, data files
    if "__pycache__/" in rel or rel.endswith((".pyc", ".pyo")):
        return False
    head, _, tail = rel.partition("/")
    return not (tail in INSTALLER_MARKS and head.endswith(".dist-info"))


def _identity_text(st: os.stat_result) -> str:
    return f"{st.st_dev}:{st.st_ino}:{st.st_size}:{st.st_mtime_ns}:{st.st_ctime_ns}"


def _record_stamp(dist_info: Path) -> str | None:
    """The identity of a package's RECORD (which decides its listing); None when it cannot be read, or
    changed a moment ago (its times may be shared with the next write)."""
    try:
        st = os.stat(dist_info / "RECORD")
    except OSError:
        return None
    if time.time_ns() - max(st.st_mtime_ns, st.st_ctime_ns) <= RACY_SECONDS * 1e9:
        return None
    return _identity_text(st)


def _unchanged(dist_info: Path, known: str | None) -> InstalledFiles | None:
    """The remembered answer for a package that is not editable, while its RECORD and every file its listing
    names keep the identity they had (the listing is not read again: the answer keeps its file names)."""
    if not known:
        return None
    try:
        doc = json.loads(known)
        if doc.get("editable") is not False or doc.get("record") != _record_stamp(dist_info):
            return None
        paths = doc["paths"]
        if not isinstance(paths, list) or not all(isinstance(p, str) for p in paths):
            return None
        stamp = _identities(dist_info.parent, paths)
        if not stamp or stamp != doc["stamp"]:
            return None
        return InstalledFiles(files=str(doc["files"]), edited=tuple(str(e) for e in doc["edited"]))
    except (ValueError, KeyError, TypeError, AttributeError):
        return None


def cached_listing(dist_info: Path, cache: DigestCache | None) -> list[Listed] | None:
    """read_listing, answered from the cache while RECORD keeps its identity (the parse is the slow part)."""
    if cache is None:
        return read_listing(dist_info)
    try:
        st = os.stat(dist_info / "RECORD")
    except OSError:
        return None
    stamp = _identity_text(st)
    key = f"listing:{dist_info}"
    known = cache.fact(key)
    if known:
        try:
            doc = json.loads(known)
            if doc["stamp"] == stamp:
                return [Listed(rel, recorded) for rel, recorded in doc["files"]]
        except (ValueError, KeyError, TypeError):
            pass
    listing = read_listing(dist_info)
    if listing is not None and time.time_ns() - max(st.st_mtime_ns, st.st_ctime_ns) > RACY_SECONDS * 1e9:
        cache.remember(key, json.dumps({"stamp": stamp, "files": listing}))
    return listing


def read_listing(dist_info: Path) -> list[Listed] | None:
    """The files RECORD lists that holotype digests; None when there is no RECORD (an older install format).

    Rows are 'path,sha256=<digest>,size'; a path holding a comma or quote is CSV-quoted, so only those
    rows go through the csv module (the rest split at their last two commas, which is much faster)."""
    try:
        raw = read_regular(dist_info / "RECORD", limit=RECORD_LIMIT, follow=True)
    except HolotypeError:
        return None
    out: dict[str, Listed] = {}
    for line in raw.decode("utf-8", "replace").splitlines():
        if not line:
            continue
        if line[0] == '"':
            row = next(csv.reader([line]), [])
            if not row:
                continue
            rel, digest = row[0], row[1] if len(row) > 1 else ""
        else:
            parts = line.rsplit(",", 2)
            rel, digest = parts[0], parts[1] if len(parts) > 1 else ""
        if "\\" in rel:
            rel = rel.replace("\\", "/")
        if _kept(rel):
            out[rel] = Listed(rel, digest)
    return [out[rel] for rel in sorted(out)]


def contents_digest(found: Iterable[tuple[str, str]]) -> str:
    """One SHA-256 over (path, file digest) pairs, sorted: equal contents give equal digests."""
    h = hashlib.sha256()
    for rel, digest in sorted(found):
        h.update(f"{rel}\0{digest}\n".encode("utf-8", "surrogateescape"))
    return h.hexdigest()


def code_roots(site: Path, listing: list[Listed]) -> list[Path]:
    """Where an editable install's code lives, as the install itself says: the folders its `.pth` files put on
    sys.path, and the folders a setuptools finder module maps import names to."""
    roots: list[Path] = []
    for item in listing:
        if "/" in item.rel or not item.rel.endswith((".pth", "_finder.py")):
            continue
        try:
            text = read_regular(site / item.rel, limit=1 << 20, follow=True).decode("utf-8", "replace")
        except HolotypeError:
            continue
        if item.rel.endswith(".pth"):
            roots += [Path(line.strip()) for line in text.splitlines()
                      if line.strip() and not line.startswith(("#", "import ", "import\t")) and
                      os.path.isabs(line.strip())]
            continue
        match = re.search(r"^MAPPING\s*(?::[^=]*)?=\s*(\{.*?\})\s*$", text, re.MULTILINE | re.DOTALL)
        if match:
            try:
                mapping = ast.literal_eval(match.group(1))
            except (ValueError, SyntaxError):
                continue
            if isinstance(mapping, dict):
                roots += [Path(v) for v in mapping.values() if isinstance(v, str) and os.path.isabs(v)]
    return roots


def _importable(rel: str, imports: tuple[str, ...]) -> bool:
    """Whether a source-folder file belongs to one of the package's import names (`name/…`, `src/name/…`,
    `name.py`, at any depth): the code an install runs, not its documents, tests or notebooks."""
    parts = rel.split("/")
    return any(part in imports for part in parts[:-1]) or parts[-1].rsplit(".", 1)[0] in imports


def _source_tree(folder: Path, project: Path, excludes: tuple[str, ...], skip: set[str],
                 imports: tuple[str, ...] = (), roots: list[Path] | None = None, below: tuple[str, ...] = ()) -> tuple[
                     dict[str, ProjectFile], str | None]:
    """Files of a local install's source folder, or a note saying why it is not digested.

    Only code counts, not the folder's documents, tests or notebooks: the files under the `roots` the
    install put on the import path (inside the folder), else those of its import names, else all."""
    try:
        real, root_real = folder.resolve(), project.resolve()
    except OSError:
        return {}, "its source folder cannot be read"
    if not real.is_dir():
        return {}, "its source folder is gone"
    if real == root_real or root_real in real.parents:
        return {}, "it is the project itself (its files are the project's data and code)"
    inside = root_real in real.parents
    prefix = real.relative_to(root_real).as_posix() + "/" if inside else ""
    walker = ProjectWalker(real, TREE_SKIP, allow_outside=True)  # links are recorded by their text
    inner = [r.resolve().relative_to(real).as_posix() for r in roots or ()
             if r.resolve() == real or real in r.resolve().parents]
    if inner and "." not in inner:
        # only the folders the install puts on the import path are walked: the rest of a source checkout
        # (its documents, notebooks, a data tree of 100,000 files) is not the package's code
        found, _ = walker.collect(tuple(inner))
    else:
        found, _ = walker.collect((".",))
    if inner and "." not in inner:
        pass
    elif imports and any(_importable(rel, imports) for rel in found):
        found = {rel: item for rel, item in found.items() if _importable(rel, imports)}
    kept: dict[str, ProjectFile] = {}
    for rel, item in found.items():
        if inside and (prefix + rel in skip or (below and (prefix + rel).startswith(below))
                       or (excludes and is_excluded(prefix + rel, excludes))):
            continue  # the project's data, outputs and excludes are not the package's code
        kept[rel] = item
        if len(kept) > TREE_LIMIT:
            return {}, f"its source folder holds more than {TREE_LIMIT:,} files"
    return kept, None


def _identities(site: Path, rels: list[str]) -> str:
    """One digest of every listed file's identity (inode, size, times, mode): unchanged files give the same.

    "" when a file changed a moment ago: its times may be shared with the next write, so nothing is trusted."""
    prefix = str(site) + os.sep
    lstat = os.lstat
    numbers = array("q")
    add = numbers.extend
    names: list[str] = []
    for rel in rels:
        try:
            st = lstat(prefix + rel)
        except OSError:
            names.append(rel + "\0-")
            add(MISSING)
            continue
        names.append(rel)
        add((st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns, st.st_mode))
    return identities_digest(names, numbers, 6)


def _listed_contents(site: Path, listing: list[Listed], cache: DigestCache | None) -> InstalledFiles:
    """Digest the files of one listing (each through the stat cache) and compare them with RECORD."""
    wanted: dict[str, ProjectFile] = {}
    for item in listing:
        full = os.path.join(site, item.rel)
        wanted[full] = ProjectFile(full, full, os.path.islink(full), 0)
    digests = fingerprint_files(wanted, cache=cache)
    found: list[tuple[str, str]] = []
    edited: list[str] = []
    for item in listing:
        got = digests.records.get(os.path.join(site, item.rel))
        if got is None:
            actual = "missing"
        elif got.kind == "symlink":
            actual = "symlink:" + (got.target or "")
        else:
            actual = got.sha256 or "missing"
        found.append((item.rel, actual))
        expected = item.sha256
        if expected is not None and actual != expected:
            edited.append(item.rel)
    return InstalledFiles(files=contents_digest(found), edited=tuple(edited))


def digest_installed(env: Environment, project: Path, *, cache: DigestCache | None, excludes: tuple[str, ...] = (),
                     skip: Iterable[str] = (), skip_below: Iterable[str] = ()) -> dict[str, InstalledFiles]:
    """Digest every package's installed files (and local source trees); keyed by package name. A local
    source tree inside the project leaves out the project's files in `skip` and below the folders `skip_below`.

    With the cache, a package whose listed files all keep their identity since the last time is answered
    from it without looking further; `check --full` (no cache) reads every byte."""
    out: dict[str, InstalledFiles] = {}
    roots: dict[str, list[Path]] = {}
    # every package's last answer in one query; a package that is not editable is answered from it without
    # reading its listing when RECORD and every listed file keep their identity
    known_answers = cache.facts([f"installed:{loc}" for loc in env.locations.values()]) if cache is not None else {}
    for name, location in sorted(env.locations.items()):
        key = f"installed:{location}"
        editable = name in env.packages and env.packages[name].origin.kind == "editable"
        answer = None if editable else _unchanged(Path(location), known_answers.get(key))
        if answer is not None:
            out[name] = answer
            continue
        record = _record_stamp(Path(location))  # before the listing is read: a later change is seen next time
        listing = cached_listing(Path(location), cache)
        if listing is None:
            continue
        site = Path(location).parent
        if editable:
            roots[name] = code_roots(site, listing)
            # what an editable install puts in site-packages names the source folder's absolute path (a .pth
            # file, a finder module): not its code, which `tree` digests; left out so a moved copy is equal
            listing = [item for item in listing if "/" in item.rel or not (
                item.rel.endswith(".pth") or item.rel.startswith("__editable__"))]
        rels = [rel for rel, _ in listing]
        stamp = _identities(site, rels) if cache is not None else ""
        got: InstalledFiles | None = None
        if cache is not None and stamp:
            known = known_answers.get(key)
            try:
                doc = json.loads(known) if known else None
                if isinstance(doc, dict) and doc["stamp"] == stamp:
                    got = InstalledFiles(files=str(doc["files"]), edited=tuple(doc["edited"]))
                    if doc.get("record") == record and doc.get("editable") == editable:
                        out[name] = got
                        continue
            except (ValueError, KeyError, TypeError):
                pass
        got = out[name] = got or _listed_contents(site, listing, cache)
        if cache is not None and stamp and record:
            cache.remember(key, json.dumps({"stamp": stamp, "record": record, "editable": editable, "paths": rels,
                                            "files": got.files, "edited": list(got.edited)}))
    skipped = set(skip)
    below = tuple(f + "/" for f in skip_below)
    for name, rec in env.packages.items():
        url = env.sources.get(name)
        folder = local_folder(url) if url and rec.origin.kind in ("editable", "directory") else None
        if folder is None:
            continue
        files, note = _source_tree(folder, project, excludes, skipped, rec.top_level, roots.get(name), below)
        entry = out.setdefault(name, InstalledFiles())
        entry.tree_note = note
        digests = fingerprint_files(files, cache=cache)
        entry.tree = digests.records
        for rel in digests.problems:
            entry.tree[rel] = FileRecord(rel, "file", 0, "0" * 64)  # unreadable now: differs from any record
        entry.tree = dict(sorted(entry.tree.items()))
    return out


def with_installed(env: Environment, found: dict[str, InstalledFiles]) -> Environment:
    """The environment with each package's `files`, `edited` and `tree` filled in."""
    packages: dict[str, PackageRecord] = {}
    for name, rec in env.packages.items():
        got = found.get(name)
        packages[name] = rec if got is None else dataclasses.replace(
            rec, files=got.files, edited=got.edited, tree=got.tree, tree_note=got.tree_note)
    return dataclasses.replace(env, packages=packages)
