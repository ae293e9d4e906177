"""The holotype.lock format (TOML, format 2), and nothing else. Documented key by key in docs/lockfile.md.

The tables are declared once, as the record types in `records.py`; `schema.py` reads and writes
them. Format 1 (holotype 0.1) is still read: it is converted in memory and the user is told once.
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path
from typing import Any

from holotype.atomic import write_atomic
from holotype.errors import InputError, LockfileError
from holotype.records import ORIGIN_KINDS, LockContents
from holotype.safe_files import read_regular
from holotype.schema import SchemaError, from_table, to_table

FORMAT = 2
LOCK_NAME = "holotype.lock"
HEADER = "# Written by holotype; do not edit by hand. Format described in holotype's docs/lockfile.md.\n"
TRAILER = "# end of holotype.lock\n"
MAX_LOCK_BYTES = 1 << 30


def lock_to_dict(lock: LockContents) -> dict[str, Any]:
    """The TOML document for `lock`, keys in a stable order so equal locks give equal bytes."""
    return {"format": FORMAT, **to_table(lock)}


def dump_lock(lock: LockContents) -> str:
    """The exact text of holotype.lock for `lock`."""
    import tomli_w

    return HEADER + tomli_w.dumps(lock_to_dict(lock)) + TRAILER


def write_lock(path: Path, lock: LockContents) -> None:
    """Write `lock` atomically to `path`."""
    write_atomic(path, dump_lock(lock))


def _from_format_1(doc: dict[str, Any], path: Path) -> dict[str, Any]:
    """Format 1 kept a package's origin kind beside its source table and called an analysis' command `run`."""
    doc = dict(doc)
    if isinstance(doc.get("packages"), dict):
        packages = {}
        for name, pkg in doc["packages"].items():
            if isinstance(pkg, dict):
                pkg = dict(pkg)
                kind = pkg.pop("origin", "index")
                if kind not in ORIGIN_KINDS:
                    raise LockfileError(f"key 'packages.{name}.origin' is '{kind}', expected one of "
                                        f"{', '.join(ORIGIN_KINDS)}", path)
                source = pkg.get("source")
                pkg["source"] = {**(source if isinstance(source, dict) else {}), "kind": kind}
            packages[name] = pkg
        doc["packages"] = packages
    if isinstance(doc.get("analyses"), dict):
        doc["analyses"] = {name: {("command" if k == "run" else k): v for k, v in table.items()}
                           if isinstance(table, dict) else table for name, table in doc["analyses"].items()}
    return doc


def lock_from_dict(doc: dict[str, Any], path: Path) -> LockContents:
    """Validate a parsed lockfile document and build its contents."""
    fmt = doc.get("format")
    if fmt is None:
        raise LockfileError("missing key 'format'", path)
    if isinstance(fmt, bool) or not isinstance(fmt, int):
        raise LockfileError(f"key 'format' should be an integer, found {type(fmt).__name__}", path)
    if fmt > FORMAT:
        raise LockfileError(f"written by a newer holotype (format {fmt}); this holotype reads format {FORMAT} — "
                            "upgrade holotype", path)
    if fmt < 1:
        raise LockfileError(f"unknown format {fmt}", path)
    notices: tuple[str, ...] = ()
    if fmt == 1:
        doc = _from_format_1(doc, path)
        notices = (f"{path}: format 1 (holotype 0.1), read as format {FORMAT}; the next record or adopt writes "
                   f"format {FORMAT}",)
    try:
        lock = from_table(LockContents, doc)
    except SchemaError as exc:
        raise LockfileError(str(exc), path) from None
    except RecursionError:
        raise LockfileError("nested too deeply to be a lockfile", path) from None
    lock.notices = notices
    return lock


def parse_lock(text: str, path: Path) -> LockContents:
    """Parse lockfile text; raise LockfileError naming `path` for anything wrong."""
    if "\x00" in text:
        raise LockfileError("not a lockfile (contains NUL bytes)", path)
    if not text.strip():
        raise LockfileError("empty lockfile", path)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise LockfileError(f"invalid TOML: {exc}", path) from None
    except RecursionError:
        raise LockfileError("invalid TOML: nested too deeply", path) from None
    if not text.rstrip("\n").endswith(TRAILER.rstrip("\n")):
        raise LockfileError("truncated: the closing line '# end of holotype.lock' is missing", path)
    return lock_from_dict(doc, path)


def read_lock(path: Path) -> LockContents:
    """Read and validate a lockfile."""
    if not os.path.lexists(path):
        raise LockfileError("no lockfile here; run 'holotype record' first", path)
    try:
        raw = read_regular(path, limit=MAX_LOCK_BYTES)
    except InputError as exc:
        raise LockfileError(exc.detail, path) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise LockfileError(f"not UTF-8 text (byte {exc.start})", path) from None
    return parse_lock(text, path)
