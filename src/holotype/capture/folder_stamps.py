"""A big data folder's *stamp*, and the workers that take the stamps of a check's folders on every core.

A stamp is one SHA-256 over the paths and identities (device, inode, size, times) of a folder's files, from
the walk's own lstat; a link adds its own lstat and its text. data_folders.py remembers the stamp beside the
folder's listing digest; when the stamp taken now equals it, no file in the folder changed by stat, so the
folder is judged unchanged without its files being looked up or its listing compared. A folder with a file
changed in the last moments gets no stamp (the racy-timestamp rule of digest_cache.py).

Taking a stamp costs a stat per file, and one process stats only so fast, so a cached `check` of a big tree
takes them in worker processes of its own (`python -m holotype.capture.folder_stamps`), one per core, while
it walks the rest of the project itself. A worker reads one JSON request on standard input (the project
root, its excludes and outputs, and the folders) and answers one JSON list of [folder, stamp, files].
"""

from __future__ import annotations

import json
import os
import sys
from array import array
from collections.abc import Callable
from itertools import chain
from operator import itemgetter
from pathlib import Path
from typing import TYPE_CHECKING

from holotype.capture.hashing import Identity, identities_digest
from holotype.capture.walk import ProjectFile, ProjectWalker, is_excluded
from holotype.errors import HolotypeError

if TYPE_CHECKING:
    import subprocess

NO_IDENTITY: Identity = (-1, -1, -1, -1, -1)
WORKER_FILES = 20_000  # below this many files the stamps are taken in this process: a worker costs its start-up


def _link_identity(item: ProjectFile) -> tuple[Identity, str]:
    """A link's own lstat and its text: pointing a link elsewhere makes it anew, and changes both."""
    try:
        st = os.lstat(item.path)
        return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns), os.readlink(item.path)
    except OSError:
        return NO_IDENTITY, "\0"  # unreadable now: such a file makes the folder's digest report a problem


def stamp(files: list[ProjectFile]) -> str:
    """One digest of the files' paths and identities (in path order); "" when one changed too recently."""
    names = [f.rel for f in files]
    idents: list[Identity] = [f.ident or NO_IDENTITY for f in files]
    for i, f in enumerate(files):
        if f.is_link or f.ident is None:
            idents[i], text = _link_identity(f)
            names[i] = f"{f.rel}\0{text}"
    return identities_digest(names, array("q", chain.from_iterable(idents)), 5)


Row = tuple[str, int, int, int, int, int]  # project-relative path, then device, inode, size, mtime_ns, ctime_ns


# a folder is opened once and its entries stat-ed and opened relative to it (the kernel then resolves one name
# per file, not the whole path); where os.listdir takes no descriptor (Windows), by path
_BY_DESCRIPTOR = os.listdir in os.supports_fd and os.stat in os.supports_dir_fd and os.open in os.supports_dir_fd
_FOLDER_FLAGS = os.O_RDONLY | getattr(os, "O_DIRECTORY", 0) | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_NOFOLLOW", 0)
_KIND, _FILE, _FOLDER, _LINK = 0o170000, 0o100000, 0o040000, 0o120000  # st_mode's file-type bits
FolderVisit = Callable[[int | str, str, list[str], list[os.stat_result]], None]
Visit = Callable[[int | str, int, list[Row]], None]


def plain_folders(walker: ProjectWalker, rel: str, visit: FolderVisit) -> bool:
    """Visit each folder at or below folder `rel` that holds regular files, while it is open: its descriptor
    (or path), the project-relative prefix of its files' paths, their names (sorted) and their lstat. Which
    files it gives, what it leaves out and where it goes down are the project walk's own rules
    (`leaves_out`, `enters`); like that walk, it passes over what is neither a file, a folder nor a link.

    Per file this costs one stat and no other Python object. False when the folder holds what only the
    walk can judge: a link, a name that is not plain ASCII (the walk checks it), an entry that cannot be
    stat-ed, a folder that cannot be opened or is a link. The caller then takes the walk's way."""
    plain = rel.strip("/") or "."
    if walker.excludes and plain != "." and is_excluded(plain, walker.excludes):
        return True
    leaves_out = walker.leaves_out if walker.excludes or walker.outputs else None
    enters = walker.enters
    stat = os.stat
    stack = [(os.path.join(walker.root, rel), "" if plain == "." else plain + "/")]
    while stack:
        current, prefix = stack.pop()
        try:
            # a folder that is a link now is refused (the walk decides what to do with it)
            where: int | str = os.open(current, _FOLDER_FLAGS) if _BY_DESCRIPTOR else current
        except OSError:
            return False
        try:
            try:
                names = os.listdir(where)
            except OSError:
                return False
            if not "".join(names).isascii():
                return False
            if leaves_out is not None:
                names = [name for name in names if not leaves_out(prefix + name, name)]
            names.sort()
            try:
                if isinstance(where, int):
                    stats = [stat(name, dir_fd=where, follow_symlinks=False) for name in names]
                else:
                    stats = [stat(os.path.join(where, name), follow_symlinks=False) for name in names]
            except OSError:
                return False
            if {st.st_mode & _KIND for st in stats} - {_FILE}:  # not only files: sort the rest out
                files: list[str] = []
                kept: list[os.stat_result] = []
                for name, st in zip(names, stats):
                    kind = st.st_mode & _KIND
                    if kind == _FILE:
                        files.append(name)
                        kept.append(st)
                    elif kind == _LINK:
                        return False
                    elif kind == _FOLDER:
                        full = os.path.join(current, name)
                        if enters(name, full):
                            stack.append((full, prefix + name + "/"))
                names, stats = files, kept
            if names:
                visit(where, prefix, names, stats)
        finally:
            if isinstance(where, int):
                os.close(where)
    return True


def plain_rows(walker: ProjectWalker, rel: str, visit: Visit | None = None) -> list[Row] | None:
    """The files `plain_folders` gives, as (path, identity) rows: in path order, or with `visit`, handed
    folder by folder while the folder is open (its descriptor or path, how many leading characters of a
    row's path name it, its rows). None where `plain_folders` declines."""
    rows: list[Row] = []

    def each(where: int | str, prefix: str, names: list[str], stats: list[os.stat_result]) -> None:
        here = [(prefix + name, st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)
                for name, st in zip(names, stats)]
        if visit is not None:
            visit(where, len(prefix), here)
        rows.extend(here)

    if not plain_folders(walker, rel, each):
        return None
    if visit is None:
        rows.sort()  # the paths differ, so by path
    return rows


def rows_stamp(rows: list[Row]) -> str:
    """`stamp` of files given as rows (in path order)."""
    numbers = array("q")
    for row in rows:
        numbers.extend(row[1:])
    return identities_digest([row[0] for row in rows], numbers, 5)


def plain_stamp(walker: ProjectWalker, rel: str) -> tuple[str, int] | None:
    """`stamp` of the files below folder `rel`, and their count, from `plain_folders` (a third of the time
    of the walk's per-file records); None where `plain_folders` declines."""
    parts: list[tuple[str, list[str], list[os.stat_result]]] = []
    if not plain_folders(walker, rel, lambda _where, prefix, names, stats: parts.append((prefix, names, stats))):
        return None
    if len(parts) > 1:  # several folders: into path order across them (the paths differ)
        merged = sorted(((prefix + name, st) for prefix, names, stats in parts for name, st in zip(names, stats)),
                        key=itemgetter(0))
        parts = [("", [path for path, _ in merged], [st for _, st in merged])]
    if not parts:
        return "", 0
    prefix, names, stats = parts[0]
    numbers = array("q")
    add = numbers.extend
    for st in stats:
        add((st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns))
    # the paths joined as `stamp` joins them: each is the folder's prefix and a name
    return identities_digest([prefix + ("\0" + prefix).join(names)], numbers, 5), len(names)


def stamps_of(walker: ProjectWalker, folders: list[str]) -> list[tuple[str, str, int]]:
    """(folder, stamp, files) for each project-relative folder, walked as the project walk walks it; a folder
    the walk would refuse (a name that is not UTF-8, a link leading outside) gets no stamp, so the caller
    walks it itself and says why."""
    out: list[tuple[str, str, int]] = []
    for rel in folders:
        plain = plain_stamp(walker, rel)
        if plain is not None:
            out.append((rel, *plain))
            continue
        found: dict[str, ProjectFile] = {}
        try:
            walker.walk_below(rel, found)
        except HolotypeError:
            out.append((rel, "", 0))
            continue
        out.append((rel, stamp([found[k] for k in sorted(found)]) if found else "", len(found)))
    return out


class StampWorkers:
    """The stamps of `folders` (each with its recorded file count), taken in one worker process per core
    while the caller does other work; `result()` waits for them. When the folders are few, or a worker
    cannot start or answer, the stamps are taken in this process instead (same function, same answer)."""

    def __init__(self, walker: ProjectWalker, folders: dict[str, int]) -> None:
        self.walker = walker
        self.folders = sorted(folders)
        self.procs: list[subprocess.Popen[bytes]] = []
        workers = min(os.cpu_count() or 1, 4, len(folders))
        if workers < 2 or sum(folders.values()) < WORKER_FILES:
            return
        shares: list[list[str]] = [[] for _ in range(workers)]
        loads = [0] * workers
        for rel in sorted(folders, key=lambda f: -folders[f]):  # biggest first, each to the least loaded
            k = loads.index(min(loads))
            shares[k].append(rel)
            loads[k] += folders[rel]
        from holotype.capture import head_start  # not in a worker, which answers and needs no other process

        root = os.path.realpath(walker.root)
        request = {"root": root, "excludes": list(walker.excludes), "allow_outside": walker.allow_outside,
                   "outputs": sorted(walker.outputs)}
        requests = [{**request, "folders": share} for share in shares]
        ahead = head_start.take(root, requests)
        if ahead is not None:
            self.procs = ahead
            return
        head_start.remember(root, requests)
        try:
            for each in requests:
                self.procs.append(head_start.spawn(each))
        except OSError:
            self.stop()

    def stop(self) -> None:
        from holotype.capture import head_start

        head_start.stop(self.procs)
        self.procs = []

    def result(self) -> dict[str, tuple[str, int]]:
        got: dict[str, tuple[str, int]] = {}
        try:
            for proc in self.procs:
                assert proc.stdout is not None
                out = proc.stdout.read()
                if proc.wait() == 0:
                    got.update((rel, (s, int(n))) for rel, s, n in json.loads(out))
        except (OSError, ValueError, TypeError):
            got = {}
        finally:
            self.stop()
        missing = [rel for rel in self.folders if rel not in got]
        got.update((rel, (s, n)) for rel, s, n in stamps_of(self.walker, missing))
        return got


def main() -> None:
    request = json.loads(sys.stdin.buffer.read())
    walker = ProjectWalker(Path(request["root"]), tuple(request["excludes"]), bool(request["allow_outside"]),
                           outputs=frozenset(request["outputs"]))
    answer = stamps_of(walker, [str(f) for f in request["folders"]])
    sys.stdout.write(json.dumps(answer))


if __name__ == "__main__":
    main()
