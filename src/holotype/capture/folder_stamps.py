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
# per file, not the whole path); where os.scandir takes no descriptor (Windows), by path
_BY_DESCRIPTOR = os.scandir in os.supports_fd and os.open in os.supports_dir_fd
_FOLDER_FLAGS = os.O_RDONLY | getattr(os, "O_DIRECTORY", 0) | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_NOFOLLOW", 0)
Visit = Callable[[int | str, int, list[Row]], None]


def plain_rows(walker: ProjectWalker, rel: str, visit: Visit | None = None) -> list[Row] | None:
    """The files below folder `rel` as `walker.walk_below` finds them, as (path, identity) rows (in path order
    unless `visit` is given),
    from a stat and one small tuple per file. What it leaves out and where it goes down are the walk's own
    rules (`leaves_out`, `enters`). `visit` is given each folder's rows while the folder is open: its
    descriptor (or path), how many leading characters of a row's path name the folder, and the rows.

    None when the folder holds anything but regular files and folders with plain (ASCII) names: a link, a
    name to check, an entry that cannot be stat-ed, a folder that cannot be opened or is a link. The
    caller then takes the walk's way."""
    plain = rel.strip("/") or "."
    if walker.excludes and plain != "." and is_excluded(plain, walker.excludes):
        return []
    leaves_out = walker.leaves_out if walker.excludes or walker.outputs else None
    enters = walker.enters
    rows: list[Row] = []
    start = os.path.join(walker.root, rel)
    stack = [(start, "" if plain == "." else plain + "/")]
    while stack:
        current, prefix = stack.pop()
        try:
            # a folder that is a link now is refused (the walk decides what to do with it)
            where: int | str = os.open(current, _FOLDER_FLAGS) if _BY_DESCRIPTOR else current
        except OSError:
            return None
        try:
            try:
                with os.scandir(where) as it:
                    entries = list(it)
            except OSError:
                return None
            here: list[Row] = []
            add = here.append
            for entry in entries:
                name = entry.name
                path = prefix + name
                if leaves_out is not None and leaves_out(path, name):
                    continue
                if not name.isascii():
                    return None
                try:
                    if entry.is_file(follow_symlinks=False):
                        st = entry.stat(follow_symlinks=False)
                        add((path, st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns))
                    elif entry.is_symlink():
                        return None
                    elif entry.is_dir(follow_symlinks=False):
                        full = os.path.join(current, name)
                        if enters(name, full):
                            stack.append((full, path + "/"))
                except OSError:
                    return None
            if visit is not None and here:
                visit(where, len(prefix), here)
            rows.extend(here)
        finally:
            if isinstance(where, int):
                os.close(where)
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
    """`stamp` of the files below folder `rel`, and their count, taken from `plain_rows` (half the time of
    the walk's per-file records); None where `plain_rows` is."""
    rows = plain_rows(walker, rel)
    if rows is None:
        return None
    return (rows_stamp(rows), len(rows)) if rows else ("", 0)


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
