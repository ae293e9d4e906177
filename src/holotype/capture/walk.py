"""Turn the config's data/code/exclude patterns into a sorted list of project files, without following links."""

from __future__ import annotations

import bisect
import os
import re
import stat
from functools import lru_cache
from pathlib import Path, PurePosixPath
from typing import NamedTuple

from holotype.capture.hashing import Identity
from holotype.errors import ConfigError, InputError

# Never fingerprinted: version control, virtual environments, caches, holotype's own store.
SKIP_FOLDERS = frozenset({
    ".git", ".hg", ".svn", ".venv", "venv", "__pycache__", ".mypy_cache", ".pytest_cache",
    ".ruff_cache", ".ipynb_checkpoints", "node_modules", ".tox", ".nox", ".holotype", ".hypothesis",
})
GLOB_CHARS = frozenset("*?[")
CODE_SUFFIXES = (".py", ".ipynb")  # what the default code set takes


class ProjectFile(NamedTuple):
    """One file the walk found (a tuple: a project of 100,000 files makes 100,000 of them, and a tuple is
    the cheapest immutable record Python builds)."""

    rel: str  # project-relative POSIX path
    path: str  # as the OS names it (a str: building a Path per file costs more than the stat)
    is_link: bool
    size: int
    ident: Identity | None = None  # from the walk's own lstat, so hashing and the cache need no second one


@lru_cache(maxsize=512)
def glob_regex(pattern: str) -> re.Pattern[str]:
    """A regex for a path glob: '*' and '?' stay inside one folder, '**/' spans any number of them."""
    out = []
    i = 0
    while i < len(pattern):
        c = pattern[i]
        if pattern.startswith("**/", i):
            out.append("(?:.*/)?")
            i += 3
            continue
        if pattern.startswith("**", i):
            out.append(".*")
            i += 2
            continue
        if c == "*":
            out.append("[^/]*")
        elif c == "?":
            out.append("[^/]")
        elif c == "[":
            end = pattern.find("]", i + 1)
            if end == -1:
                out.append(re.escape(c))
            else:
                body = pattern[i + 1:end].replace("\\", "\\\\")
                if body.startswith("!"):
                    body = "^" + body[1:]
                out.append(f"[{body}]")
                i = end
        else:
            out.append(re.escape(c))
        i += 1
    return re.compile("".join(out) + r"\Z")


def matches(rel: str, pattern: str) -> bool:
    """Whether project-relative `rel` matches `pattern`; a pattern without '/' matches the name at any depth."""
    if "/" not in pattern.rstrip("/"):
        return bool(glob_regex(pattern.rstrip("/")).match(rel.rsplit("/", 1)[-1]))
    return bool(glob_regex(pattern.rstrip("/")).match(rel))


def is_excluded(rel: str, excludes: tuple[str, ...]) -> bool:
    if not excludes:
        return False
    parts = rel.split("/")
    for pattern in excludes:
        if matches(rel, pattern):
            return True
        # excluding a folder excludes everything below it
        for depth in range(1, len(parts)):
            if matches("/".join(parts[:depth]), pattern):
                return True
    return False


class _Excluder:
    """`is_excluded` for a walk that goes down folder by folder: a folder's own path was already tested
    when the walk entered it, so each entry tests only its own path (and its name against name patterns)."""

    def __init__(self, excludes: tuple[str, ...]) -> None:
        self.names = [glob_regex(p.rstrip("/")) for p in excludes if "/" not in p.rstrip("/")]
        self.paths = [glob_regex(p.rstrip("/")) for p in excludes if "/" in p.rstrip("/")]

    def __call__(self, rel: str, name: str) -> bool:
        return any(r.match(name) for r in self.names) or any(r.match(rel) for r in self.paths)


def _utf8_name(rel: str) -> None:
    """File names are recorded as UTF-8 text; a name the OS gave as other bytes cannot be, so say which."""
    try:
        rel.encode("utf-8")
    except UnicodeEncodeError:
        shown = rel.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")
        raise InputError("file name is not valid UTF-8, so holotype cannot record it; rename it, or add it to "
                         "'exclude'", shown) from None


class ProjectWalker:
    """Walks the project tree with os.scandir; one pass, no per-file subprocess, links not followed."""

    def __init__(self, root: Path, excludes: tuple[str, ...] = (), allow_outside: bool = False,
                 config_path: Path | None = None, outputs: frozenset[str] = frozenset(),
                 set_aside: frozenset[str] = frozenset()) -> None:
        self.root = Path(root)
        # folders (project-relative) this walk does not enter: their stamps are being taken elsewhere
        # (folder_stamps.py), and the caller walks the ones that changed with walk_below
        self.set_aside = set_aside
        self.outputs = outputs  # declared outputs: never inputs, so never looked at (a link among them included)
        self.root_real = os.path.realpath(self.root)
        self.excludes = excludes
        self.allow_outside = allow_outside
        self.config_path = config_path
        self._excluder = _Excluder(excludes)
        self._everything: dict[str, ProjectFile] | None = None
        self._keys: list[str] = []
        self._values: list[ProjectFile] = []
        self._code: list[str] = []  # the regular files with a code suffix, as the whole-project walk met them

    def _rel(self, path: str) -> str:
        return PurePosixPath(Path(os.path.relpath(path, self.root)).as_posix()).as_posix()

    def _check_link(self, full: str, rel: str) -> None:
        if self.allow_outside:
            return
        target = os.path.realpath(full)
        if target != self.root_real and not target.startswith(self.root_real + os.sep):
            raise ConfigError(f"'{rel}' is a symbolic link leading outside the project (to {os.readlink(full)}); "
                              "set allow_outside = true to permit it", self.config_path)

    def leaves_out(self, rel: str, name: str) -> bool:
        """Whether the walk passes over entry `name` at project-relative `rel`: excluded, or a declared output."""
        return bool(self.excludes and self._excluder(rel, name)) or bool(self.outputs and rel in self.outputs)

    @staticmethod
    def enters(name: str, full: str) -> bool:
        """Whether the walk goes down into folder `name` (at `full`): not a skipped folder, not a venv."""
        return name not in SKIP_FOLDERS and not os.path.exists(full + "/pyvenv.cfg")

    def _walk_folder(self, folder: str, out: dict[str, ProjectFile], code: list[str] | None = None) -> None:
        """Every file below `folder` into `out`; with `code`, the regular files with a code suffix into it."""
        # relative names are built by joining strings: os.path.relpath per file is the slow part otherwise
        start_rel = self._rel(folder)
        if self.excludes and start_rel != "." and is_excluded(start_rel, self.excludes):
            return
        set_aside = self.set_aside
        if set_aside and (start_rel in set_aside or any(start_rel.startswith(f + "/") for f in set_aside)):
            return
        leaves_out = self.leaves_out if self.excludes or self.outputs else None
        new = tuple.__new__  # a NamedTuple's own constructor is a Python-level function, and slower
        stack = [(folder, "" if start_rel == "." else start_rel + "/")]
        while stack:
            current, prefix = stack.pop()
            try:
                with os.scandir(current) as it:
                    entries = list(it)
            except OSError:
                continue  # unreadable folder: nothing inside it can be listed
            for entry in entries:
                name = entry.name
                rel = prefix + name
                if leaves_out is not None and leaves_out(rel, name):
                    continue
                if not name.isascii():
                    _utf8_name(rel)
                full = entry.path
                try:
                    if entry.is_file(follow_symlinks=False):  # the common case first
                        st = entry.stat(follow_symlinks=False)
                        size = st.st_size
                        out[rel] = new(ProjectFile, (rel, full, False, size,
                                                     (st.st_dev, st.st_ino, size, st.st_mtime_ns, st.st_ctime_ns)))
                        if code is not None and name.endswith(CODE_SUFFIXES):
                            code.append(rel)
                    elif entry.is_symlink():
                        self._check_link(full, rel)
                        out[rel] = ProjectFile(rel, full, True, 0)
                    elif entry.is_dir(follow_symlinks=False):
                        if not self.enters(name, full) or (set_aside and rel in set_aside):
                            continue
                        stack.append((full, rel + "/"))
                except OSError:
                    out[rel] = ProjectFile(rel, full, False, 0)
                    if code is not None and name.endswith(CODE_SUFFIXES):
                        code.append(rel)

    def _add_path(self, full: str, rel: str, out: dict[str, ProjectFile]) -> None:
        try:
            st = os.lstat(full)
        except OSError:
            return
        if stat.S_ISLNK(st.st_mode):
            self._check_link(full, rel)
            out[rel] = ProjectFile(rel, full, True, 0)
        elif stat.S_ISDIR(st.st_mode):
            self._walk_folder(full, out)
        elif stat.S_ISREG(st.st_mode):
            out[rel] = ProjectFile(rel, full, False, st.st_size,
                                   (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns))

    def walk_below(self, rel: str, out: dict[str, ProjectFile]) -> None:
        """Every file at or below project-relative folder `rel` into `out`, as the whole-project walk would
        find them (a folder set aside included)."""
        aside, self.set_aside = self.set_aside, frozenset()
        try:
            self._walk_folder(os.path.join(self.root, rel), out)
        finally:
            self.set_aside = aside

    def covers_set_aside(self, pattern: str) -> bool:
        """Whether plain `pattern` is at or below a folder set aside (its files may all be there)."""
        plain = pattern.rstrip("/") or "."
        return any(plain in (".", f) or f.startswith(plain + "/") or plain.startswith(f + "/")
                   for f in self.set_aside)

    def everything(self) -> dict[str, ProjectFile]:
        """Every file of the project the walk sees (skipped folders and excludes left out), walked once."""
        if self._everything is None:
            found: dict[str, ProjectFile] = {}
            self._walk_folder(str(self.root), found, self._code)
            self._keys = sorted(found)
            self._values = [found[k] for k in self._keys]
            self._everything = dict(zip(self._keys, self._values))
        return self._everything

    def _from_everything(self, rel: str) -> dict[str, ProjectFile] | None:
        """The files at or below `rel` as the whole-project walk found them; None when it found none there
        (a path inside a skipped folder, say), so the caller walks that path itself."""
        everything = self._everything
        if everything is None:
            return None
        if rel in everything:
            return {rel: everything[rel]}
        keys = self._keys
        start = bisect.bisect_left(keys, rel + "/")
        end = bisect.bisect_left(keys, rel + "0")  # "0" is the character after "/"
        if start == 0 and end == len(keys) and keys:
            return everything  # every file of the project is below it (a project of data, say)
        return dict(zip(keys[start:end], self._values[start:end])) or None

    def collect(self, patterns: tuple[str, ...]) -> tuple[dict[str, ProjectFile], list[str]]:
        """Files matched by `patterns` (files, folders or globs), and the patterns that matched nothing."""
        out: dict[str, ProjectFile] = {}
        unmatched: list[str] = []
        sorted_already = False
        for pattern in patterns:
            before = len(out)
            pattern = pattern.rstrip("/") or "."
            if not GLOB_CHARS.intersection(pattern):
                full = os.path.normpath(os.path.join(self.root, pattern))
                if not os.path.lexists(full):
                    unmatched.append(pattern)
                    continue
                rel = self._rel(full)
                known = self._from_everything(rel) if not rel.startswith("..") else None
                if known is not None:
                    out.update(known)
                    sorted_already = True
                else:
                    self._add_path(full, rel, out)
            else:
                parts = pattern.split("/")
                fixed = []
                for part in parts:
                    if GLOB_CHARS.intersection(part):
                        break
                    fixed.append(part)
                base = os.path.join(self.root, *fixed) if fixed else str(self.root)
                found: dict[str, ProjectFile] = {}
                base_rel = "/".join(fixed)
                known = self._from_everything(base_rel) if self._everything is not None and fixed else None
                if self._everything is not None and not fixed:
                    found = dict(self._everything)
                elif known is not None:
                    found = known
                elif os.path.isdir(base) and not os.path.islink(base):
                    self._walk_folder(base, found)
                regex = glob_regex(pattern)
                for rel, item in found.items():
                    parts_rel = rel.split("/")
                    # a glob naming a folder takes everything below that folder
                    if regex.match(rel) or any(regex.match("/".join(parts_rel[:d])) for d in range(1, len(parts_rel))):
                        out[rel] = item
            if len(out) == before and pattern not in unmatched and not self.covers_set_aside(pattern):
                unmatched.append(pattern)
        if len(patterns) == 1 and sorted_already:
            return out, unmatched  # taken in order from the sorted whole-project walk
        return dict(sorted(out.items())), unmatched

    def code_files(self, data: dict[str, ProjectFile]) -> dict[str, ProjectFile]:
        """Default code set: every .py and .ipynb in the project outside data, skipped folders and excludes."""
        everything = self.everything()
        return {rel: everything[rel] for rel in sorted(self._code) if rel not in data}
