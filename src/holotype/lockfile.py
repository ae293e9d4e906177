"""The holotype.lock format (TOML, format 1), and nothing else. Documented key by key in docs/lockfile.md."""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any, TypeVar

from holotype.atomic import write_atomic
from holotype.errors import LockfileError
from holotype.records import (
    ORIGIN_KINDS,
    AnalysisRecord,
    FileRecord,
    HistoryEntry,
    Interpreter,
    Lock,
    Origin,
    OutputRecord,
    PackageRecord,
    PlatformInfo,
)

FORMAT = 1
LOCK_NAME = "holotype.lock"
HEADER = "# Written by holotype; do not edit by hand. Format described in holotype's docs/lockfile.md.\n"
TRAILER = "# end of holotype.lock\n"

T = TypeVar("T")


# ----------------------------------------------------------------------------- writing


def _drop_none(table: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in table.items() if v is not None and v != () and v != []}


def _origin_table(origin: Origin) -> dict[str, Any]:
    return _drop_none(
        {
            "url": origin.url,
            "vcs": origin.vcs,
            "commit": origin.commit,
            "requested_revision": origin.requested_revision,
            "archive_hash": origin.archive_hash,
            "subdirectory": origin.subdirectory,
        }
    )


def _package_table(pkg: PackageRecord) -> dict[str, Any]:
    table: dict[str, Any] = {
        "version": pkg.version,
        "used": pkg.used,
        "requested": pkg.requested,
        "origin": pkg.origin.kind,
    }
    if pkg.installer:
        table["installer"] = pkg.installer
    if pkg.top_level:
        table["imports"] = list(pkg.top_level)
    if pkg.requires:
        table["requires"] = list(pkg.requires)
    if pkg.origin.kind != "index":
        table["source"] = _origin_table(pkg.origin)
    return table


def _file_table(rec: FileRecord) -> dict[str, Any]:
    if rec.kind == "symlink":
        return {"symlink": rec.target or ""}
    return {"sha256": rec.sha256, "size": rec.size}


def lock_to_dict(lock: Lock) -> dict[str, Any]:
    """The TOML document for `lock`, keys in a stable order so equal locks give equal bytes."""
    doc: dict[str, Any] = {"format": FORMAT, "holotype": lock.holotype, "recorded": lock.recorded}
    if lock.project_seed is not None:
        doc["project_seed"] = lock.project_seed
    doc["interpreter"] = _drop_none(
        {
            "implementation": lock.interpreter.implementation,
            "version": lock.interpreter.version,
            "compiler": lock.interpreter.compiler,
            "abi": lock.interpreter.abi,
            "executable": lock.interpreter.executable,
        }
    )
    doc["platform"] = _drop_none(
        {
            "system": lock.platform.system,
            "release": lock.platform.release,
            "machine": lock.platform.machine,
            "libc": lock.platform.libc,
            "libc_version": lock.platform.libc_version,
        }
    )
    doc["packages"] = {name: _package_table(lock.packages[name]) for name in sorted(lock.packages)}
    doc["data"] = {p: _file_table(lock.data[p]) for p in sorted(lock.data)}
    doc["code"] = {p: _file_table(lock.code[p]) for p in sorted(lock.code)}
    analyses: dict[str, Any] = {}
    for name in sorted(lock.analyses):
        rec = lock.analyses[name]
        table: dict[str, Any] = {"run": rec.run, "seed": rec.seed}
        if rec.inputs:
            table["inputs"] = list(rec.inputs)
        table["outputs"] = {
            p: _drop_none(
                {
                    "sha256": rec.outputs[p].sha256,
                    "size": rec.outputs[p].size,
                    "tolerance": dict(sorted(rec.outputs[p].tolerance.items())) or None,
                }
            )
            for p in sorted(rec.outputs)
        }
        analyses[name] = table
    doc["analyses"] = analyses
    if lock.history:
        doc["history"] = [
            {
                "when": h.when,
                "who": h.who,
                "reason": h.reason,
                "analyses": list(h.analyses),
                "changes": [{"output": o, "old": old, "new": new} for o, old, new in h.changes],
            }
            for h in lock.history
        ]
    return doc


def dump_lock(lock: Lock) -> str:
    """The exact text of holotype.lock for `lock`."""
    import tomli_w

    return HEADER + tomli_w.dumps(lock_to_dict(lock)) + TRAILER


def write_lock(path: Path, lock: Lock) -> None:
    """Write `lock` atomically to `path`."""
    write_atomic(path, dump_lock(lock))


# ----------------------------------------------------------------------------- reading


_TYPE_WORDS: dict[type, str] = {dict: "a table", str: "a string", int: "an integer", float: "a number",
                                 list: "a list", bool: "true or false"}


class _Reader:
    def __init__(self, path: Path) -> None:
        self.path = path

    def fail(self, message: str) -> LockfileError:
        return LockfileError(message, self.path)

    def get(self, table: dict[str, Any], key: str, kind: type[T], where: str, default: Any = ...) -> T:
        if key not in table:
            if default is ...:
                raise self.fail(f"missing key '{where}{key}'")
            return default  # type: ignore[no-any-return]
        value = table[key]
        ok = isinstance(value, kind) and not (kind is int and isinstance(value, bool))
        if kind is float and isinstance(value, int) and not isinstance(value, bool):
            ok, value = True, float(value)
        if not ok:
            raise self.fail(f"key '{where}{key}' should be {_TYPE_WORDS.get(kind, kind.__name__)}, "
                            f"found {_TYPE_WORDS.get(type(value), type(value).__name__)}")
        return value  # type: ignore[no-any-return]

    def table(self, parent: dict[str, Any], key: str, where: str) -> dict[str, Any]:
        return self.get(parent, key, dict, where, default={})

    def strings(self, table: dict[str, Any], key: str, where: str) -> tuple[str, ...]:
        items = self.get(table, key, list, where, default=[])
        if not all(isinstance(x, str) for x in items):
            raise self.fail(f"key '{where}{key}' should be a list of strings")
        return tuple(items)

    def optional_str(self, table: dict[str, Any], key: str, where: str) -> str | None:
        return self.get(table, key, str, where, default=None)


def _read_files(r: _Reader, doc: dict[str, Any], section: str) -> dict[str, FileRecord]:
    out: dict[str, FileRecord] = {}
    for path, entry in r.table(doc, section, "").items():
        where = f"{section}.{path}."
        if not isinstance(entry, dict):
            raise r.fail(f"key '{section}.{path}' should be a table")
        if "symlink" in entry:
            out[path] = FileRecord(path, "symlink", target=r.get(entry, "symlink", str, where))
        else:
            digest = r.get(entry, "sha256", str, where)
            if len(digest) != 64 or any(c not in "0123456789abcdef" for c in digest):
                raise r.fail(f"key '{where}sha256' is not a SHA-256 hex digest")
            out[path] = FileRecord(path, "file", size=r.get(entry, "size", int, where), sha256=digest)
    return out


def lock_from_dict(doc: dict[str, Any], path: Path) -> Lock:
    """Validate a parsed lockfile document and build a Lock."""
    r = _Reader(path)
    fmt = r.get(doc, "format", int, "")
    if fmt > FORMAT:
        raise r.fail(f"written by a newer holotype (format {fmt}); this holotype reads format {FORMAT} — "
                     "upgrade holotype")
    if fmt < 1:
        raise r.fail(f"unknown format {fmt}")
    it = r.table(doc, "interpreter", "")
    pf = r.table(doc, "platform", "")
    interpreter = Interpreter(
        implementation=r.get(it, "implementation", str, "interpreter."),
        version=r.get(it, "version", str, "interpreter."),
        compiler=r.get(it, "compiler", str, "interpreter.", default=""),
        abi=r.optional_str(it, "abi", "interpreter."),
        executable=r.optional_str(it, "executable", "interpreter."),
    )
    platform = PlatformInfo(
        system=r.get(pf, "system", str, "platform."),
        release=r.get(pf, "release", str, "platform.", default=""),
        machine=r.get(pf, "machine", str, "platform."),
        libc=r.optional_str(pf, "libc", "platform."),
        libc_version=r.optional_str(pf, "libc_version", "platform."),
    )
    packages: dict[str, PackageRecord] = {}
    for name, entry in r.table(doc, "packages", "").items():
        where = f"packages.{name}."
        if not isinstance(entry, dict):
            raise r.fail(f"key 'packages.{name}' should be a table")
        kind = r.get(entry, "origin", str, where, default="index")
        if kind not in ORIGIN_KINDS:
            raise r.fail(f"key '{where}origin' is '{kind}', expected one of {', '.join(ORIGIN_KINDS)}")
        src = r.table(entry, "source", where)
        origin = Origin(
            kind=kind,
            url=r.optional_str(src, "url", where + "source."),
            vcs=r.optional_str(src, "vcs", where + "source."),
            commit=r.optional_str(src, "commit", where + "source."),
            requested_revision=r.optional_str(src, "requested_revision", where + "source."),
            archive_hash=r.optional_str(src, "archive_hash", where + "source."),
            subdirectory=r.optional_str(src, "subdirectory", where + "source."),
        )
        packages[name] = PackageRecord(
            name=name,
            version=r.get(entry, "version", str, where),
            origin=origin,
            installer=r.optional_str(entry, "installer", where),
            requested=r.get(entry, "requested", bool, where, default=False),
            used=r.get(entry, "used", bool, where, default=False),
            requires=r.strings(entry, "requires", where),
            top_level=r.strings(entry, "imports", where),
        )
    analyses: dict[str, AnalysisRecord] = {}
    for name, entry in r.table(doc, "analyses", "").items():
        where = f"analyses.{name}."
        if not isinstance(entry, dict):
            raise r.fail(f"key 'analyses.{name}' should be a table")
        outputs: dict[str, OutputRecord] = {}
        for out_path, out in r.table(entry, "outputs", where).items():
            ow = f"{where}outputs.{out_path}."
            if not isinstance(out, dict):
                raise r.fail(f"key '{ow[:-1]}' should be a table")
            outputs[out_path] = OutputRecord(
                path=out_path,
                sha256=r.get(out, "sha256", str, ow),
                size=r.get(out, "size", int, ow),
                tolerance=r.table(out, "tolerance", ow),
            )
        analyses[name] = AnalysisRecord(
            name=name,
            run=r.get(entry, "run", str, where),
            seed=r.get(entry, "seed", int, where),
            outputs=outputs,
            inputs=r.strings(entry, "inputs", where),
        )
    history: list[HistoryEntry] = []
    for i, entry in enumerate(r.get(doc, "history", list, "", default=[])):
        where = f"history[{i}]."
        if not isinstance(entry, dict):
            raise r.fail(f"key 'history[{i}]' should be a table")
        changes = []
        for change in r.get(entry, "changes", list, where, default=[]):
            if not isinstance(change, dict):
                raise r.fail(f"key '{where}changes' should hold tables")
            changes.append(
                (r.get(change, "output", str, where), r.get(change, "old", str, where),
                 r.get(change, "new", str, where))
            )
        history.append(
            HistoryEntry(
                when=r.get(entry, "when", str, where),
                who=r.get(entry, "who", str, where),
                reason=r.get(entry, "reason", str, where),
                analyses=r.strings(entry, "analyses", where),
                changes=tuple(changes),
            )
        )
    seed = r.get(doc, "project_seed", int, "", default=None)
    return Lock(
        format=fmt,
        holotype=r.get(doc, "holotype", str, "", default=""),
        recorded=r.get(doc, "recorded", str, "", default=""),
        project_seed=seed,
        interpreter=interpreter,
        platform=platform,
        packages=packages,
        data=_read_files(r, doc, "data"),
        code=_read_files(r, doc, "code"),
        analyses=analyses,
        history=history,
    )


def parse_lock(text: str, path: Path) -> Lock:
    """Parse lockfile text; raise LockfileError naming `path` for anything wrong."""
    if "\x00" in text:
        raise LockfileError("not a lockfile (contains NUL bytes)", path)
    if not text.strip():
        raise LockfileError("empty lockfile", path)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise LockfileError(f"invalid TOML: {exc}", path) from None
    if not text.rstrip("\n").endswith(TRAILER.rstrip("\n")):
        raise LockfileError("truncated: the closing line '# end of holotype.lock' is missing", path)
    return lock_from_dict(doc, path)


def read_lock(path: Path) -> Lock:
    """Read and validate a lockfile."""
    try:
        raw = Path(path).read_bytes()
    except FileNotFoundError:
        raise LockfileError("no lockfile here; run 'holotype record' first", path) from None
    except OSError as exc:
        raise LockfileError(f"cannot read: {exc.strerror}", path) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise LockfileError(f"not UTF-8 text (byte {exc.start})", path) from None
    return parse_lock(text, path)
