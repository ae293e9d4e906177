"""Capture a whole project at once: target environment, which packages it uses, data and code digests."""

from __future__ import annotations

import bisect
import gc
import os
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from holotype.capture import head_start
from holotype.capture.data_folders import DataResult, fingerprint_data, remembered_stamps
from holotype.capture.digest_cache import DigestCache
from holotype.capture.environment import ProbeRun, environment_from_probe, resolve_python
from holotype.capture.fingerprints import FingerprintResult, HashProgress, fingerprint_files
from holotype.capture.folder_digests import APART_MIN_FILES, MAX_SPLIT_DEPTH, Answer, FolderDigesters
from holotype.capture.folder_stamps import StampWorkers
from holotype.capture.imports import scan_imports
from holotype.capture.installed import digest_installed, with_installed
from holotype.capture.numerics import finish_inspection, start_inspection, start_unless_known
from holotype.capture.usage import declared_requirements, mark_used, truthful_requested, used_closure
from holotype.capture.walk import GLOB_CHARS, ProjectFile, ProjectWalker, glob_regex, is_excluded
from holotype.config import Config
from holotype.errors import ConfigError
from holotype.records import Environment, FolderRecord, NumericStack


@dataclass
class ProjectCapture:
    environment: Environment
    python: str
    data: DataResult
    code: FingerprintResult
    code_problems: list[tuple[str, str]] = field(default_factory=list)
    unmatched_data: list[str] = field(default_factory=list)
    numerics: NumericStack | None = None
    imported: frozenset[str] = frozenset()  # top-level modules the project's code imports (static scan)
    requested_from: str = "installer"  # where each package's "requested" came from (capture/usage.py)


def _fixed_prefix(pattern: str) -> str:
    """The part of a pattern before its first glob character, up to a whole folder ('' for '**/*.py')."""
    parts = []
    for part in (pattern.rstrip("/") or ".").split("/"):
        if GLOB_CHARS.intersection(part):
            break
        parts.append(part)
    return "/".join(parts)


def _overlaps(prefix: str, folder: str) -> bool:
    return prefix in ("", ".", folder) or folder.startswith(prefix + "/") or prefix.startswith(folder + "/")


def folders_to_set_aside(config: Config, recorded: dict[str, FolderRecord]) -> list[str]:
    """The recorded data folders whose stamps may be taken apart from the walk: each holds no other recorded
    folder, lies wholly inside a plain data pattern (so every file below it is data), and no code pattern
    reaches into it (so none of its files can be code)."""
    data = [p.rstrip("/") or "." for p in config.data]
    if not recorded or any(GLOB_CHARS.intersection(p) for p in data):
        return []
    code = [_fixed_prefix(p) for p in config.code or ()]
    keys = sorted(recorded)
    out = []
    for folder in recorded:
        below = bisect.bisect_left(keys, folder + "/")  # the first recorded folder that could lie inside it
        if below < len(keys) and keys[below].startswith(folder + "/"):
            continue
        if any(p in (".", folder) or folder.startswith(p + "/") for p in data) and \
                not any(_overlaps(prefix, folder) for prefix in code):
            out.append(folder)
    return out


def _subfolders(walker: ProjectWalker, rel: str) -> list[str] | None:
    """The folders directly inside project-relative folder `rel` the walk would go into; None when one of
    its entries has a name to check or cannot be looked at (the walk then takes it all)."""
    try:
        with os.scandir(os.path.join(walker.root, rel)) as it:
            entries = list(it)
    except OSError:
        return None
    prefix = "" if rel == "." else rel + "/"
    out: list[str] = []
    for entry in entries:
        path = prefix + entry.name
        if walker.leaves_out(path, entry.name):
            continue
        if not entry.name.isascii():
            return None
        try:
            if entry.is_dir(follow_symlinks=False) and walker.enters(entry.name, entry.path):
                out.append(path)
        except OSError:
            return None
    return sorted(out)


def _enough_files(root: Path, folders: list[str], wanted: int) -> bool:
    """Whether at least `wanted` entries lie below `folders`, counted by name alone (and only that far)."""
    seen = 0
    stack = [os.path.join(root, f) for f in folders]
    while stack:
        try:
            with os.scandir(stack.pop()) as it:
                for entry in it:
                    seen += 1
                    if entry.is_dir(follow_symlinks=False):
                        stack.append(entry.path)
        except OSError:
            continue
        if seen >= wanted:
            return True
    return False


def subfolders_apart(config: Config) -> list[str]:
    """The folders a record hands to worker processes (folder_digests.py): the subfolders of its plain data
    folders (a lone one opened up further, so the work can be shared out), none holding code, and only when
    they hold enough files for workers to pay."""
    data = [p.rstrip("/") or "." for p in config.data]
    if not data or any(GLOB_CHARS.intersection(p) for p in data):
        return []
    code = [_fixed_prefix(p) for p in config.code or ()]
    walker = project_walker(config)
    found: set[str] = set()
    for pattern in data:
        full = os.path.join(config.root, pattern)
        if pattern != "." and (os.path.islink(full) or is_excluded(pattern, config.exclude) or
                               not walker.enters(os.path.basename(full), full)):
            continue
        listed = _subfolders(walker, pattern)
        depth = 0
        while listed is not None and len(listed) == 1 and depth < MAX_SPLIT_DEPTH:
            depth += 1
            listed = _subfolders(walker, listed[0])
        found.update(f for f in listed or () if not any(_overlaps(p, f) for p in code))
    ordered = sorted(found)
    kept = [f for i, f in enumerate(ordered) if not any(f.startswith(g + "/") for g in ordered[:i])]
    return kept if len(kept) > 1 and _enough_files(config.root, kept, APART_MIN_FILES) else []


def begin_digests(project: Path) -> None:
    """Start a record's digest workers (folder_digests.py) for the data subfolders its configuration names,
    while the rest of holotype loads (head_start.py). Any problem is left to the command, which meets it
    again."""
    if os.environ.get("HOLOTYPE_NO_HEAD_START"):
        return
    from holotype.capture.digest_cache import default_cache_path
    from holotype.config import load_config
    from holotype.errors import HolotypeError

    try:
        config = load_config(project)
        subfolders = subfolders_apart(config)
        if subfolders:
            head_start.keep_ahead(FolderDigesters(project_walker(config), subfolders, default_cache_path()))
    except (HolotypeError, OSError):
        return


def project_walker(config: Config, set_aside: frozenset[str] = frozenset()) -> ProjectWalker:
    outputs = frozenset(out for a in config.analyses for out in a.outputs)
    return ProjectWalker(config.root, config.exclude, config.allow_outside, config.source, outputs, set_aside)


def tracked_files(config: Config, walker: ProjectWalker | None = None) -> tuple[
        dict[str, ProjectFile], dict[str, ProjectFile], list[str]]:
    """Data files, code files, and data patterns that matched nothing.

    Outputs are never inputs: declared outputs are left out of both sets (an output written inside a data
    folder is not data), and the default code set also skips the folders outputs are written to (an executed
    notebook under results/ is not code). A data or code entry that names an output itself is a config error.
    """
    outputs = {out: a.name for a in config.analyses for out in a.outputs}
    for key, patterns in (("data", config.data), ("code", config.code or ())):
        for pattern in patterns:
            plain = pattern.rstrip("/")
            regex = glob_regex(plain) if GLOB_CHARS.intersection(plain) else None
            for out, name in outputs.items():
                if out == plain or (regex is not None and regex.match(out)):
                    raise ConfigError(f"'{key}' entry '{pattern}' takes in '{out}', an output of analysis '{name}'; "
                                      "an output cannot also be an input the record fingerprints (narrow the "
                                      "pattern, or move the output)", config.source)
    walker = walker or project_walker(config)
    if config.code is None:
        walker.everything()  # one walk for data and the default code set
    data, unmatched = walker.collect(config.data)
    if config.code is not None:
        code, _ = walker.collect(config.code)
    else:
        folders = {o.rsplit("/", 1)[0] + "/" for o in outputs if "/" in o}
        code = {rel: f for rel, f in walker.code_files(data).items()
                if not any(rel.startswith(folder) for folder in folders)}
    if outputs:  # the walker already leaves them out; a plain pattern naming one does not
        data = {rel: f for rel, f in data.items() if rel not in outputs}
        code = {rel: f for rel, f in code.items() if rel not in outputs}
    return data, code, unmatched


def _newly_unmatched(config: Config, walker: ProjectWalker, unmatched: list[str], entries: Iterable[str],
                     data: dict[str, ProjectFile]) -> list[str]:
    """The data patterns whose files were all in folders set aside, which turned out to hold none of them:
    those match nothing now (`entries` are the folder entries found there)."""
    entries = list(entries)
    out = list(unmatched)
    for pattern in config.data:
        plain = pattern.rstrip("/") or "."
        if pattern not in out and walker.covers_set_aside(pattern) and not any(
                _overlaps(plain, f) for f in entries) and not any(
                plain == "." or rel.startswith(plain + "/") or rel == plain for rel in data):
            out.append(pattern)
    return out


class SetAside:
    """The recorded folders whose stamps worker processes take while this process walks the rest of the
    project (and reads the environment); `finish` adds the files of those that changed to the data files."""

    def __init__(self, config: Config, remembered: dict[str, tuple[str, FolderRecord]]) -> None:
        self.config = config
        self.remembered = remembered
        self.walker = project_walker(config, frozenset(remembered))
        self.workers = StampWorkers(project_walker(config), {f: entry.files for f, (_, entry) in remembered.items()})

    @classmethod
    def start(cls, config: Config, cache: DigestCache | None, recorded: dict[str, FolderRecord]) -> SetAside | None:
        remembered = remembered_stamps(str(config.root), cache, recorded, folders_to_set_aside(config, recorded)) \
            if cache is not None else {}
        return cls(config, remembered) if remembered else None

    def stop(self) -> None:
        self.workers.stop()

    def finish(self, data: dict[str, ProjectFile], unmatched: list[str]) -> tuple[
            dict[str, ProjectFile], list[str], dict[str, FolderRecord]]:
        """The data files with those of the changed folders added, the unmatched patterns, and the entries
        of the folders found unchanged (left out of the data files)."""
        taken = self.workers.result()
        settled: dict[str, FolderRecord] = {}
        changed: dict[str, ProjectFile] = {}
        for folder, (then, entry) in self.remembered.items():
            if taken.get(folder, ("", 0))[0] == then:
                settled[folder] = entry
            else:
                self.walker.walk_below(folder, changed)
        if changed:
            data = dict(sorted({**data, **changed}.items()))
        return data, _newly_unmatched(self.config, self.walker, unmatched, settled, data), settled


class Apart:
    """The data subfolders a record's worker processes digest whole (folder_digests.py) while this process
    walks the rest of the project and reads the environment; `finish` takes their answers."""

    def __init__(self, config: Config, subfolders: list[str], cache: DigestCache) -> None:
        self.config = config
        self.walker = project_walker(config, frozenset(subfolders))
        self.digesters = FolderDigesters.start(project_walker(config), subfolders, cache.path if cache.conn else None)

    @classmethod
    def start(cls, config: Config, cache: DigestCache | None) -> Apart | None:
        subfolders = subfolders_apart(config) if cache is not None else []
        return cls(config, subfolders, cache) if subfolders and cache is not None else None

    def stop(self) -> None:
        self.digesters.stop()

    def finish(self, data: dict[str, ProjectFile], unmatched: list[str], progress: HashProgress | None) -> tuple[
            dict[str, ProjectFile], list[str], list[Answer]]:
        """The data files with the leftovers and the declined subfolders' files added, the unmatched patterns,
        and the workers' answers."""
        if progress is not None:
            progress.begin(0, 0)
        try:
            got = self.digesters.result(progress.advance if progress is not None else None)
        finally:
            if progress is not None:
                progress.end()
        added: dict[str, ProjectFile] = {}
        for rel in got.declined:
            self.walker.walk_below(rel, added)
        root = str(self.config.root)
        for answer in got.answers.values():
            for rel, dev, ino, size, mtime, ctime in answer.loose:
                added[rel] = ProjectFile(rel, os.path.join(root, rel), False, size, (dev, ino, size, mtime, ctime))
        if added:
            data = dict(sorted({**data, **added}.items()))
        answers = list(got.answers.values())
        entries = [rec.path for a in answers for rec, _, _ in a.folders]
        return data, _newly_unmatched(self.config, self.walker, unmatched, entries, data), answers


@contextmanager
def _collector_paused() -> Iterator[None]:
    """Python's cyclic garbage collector paused: a capture builds a few small records per file (100,000 files
    make half a million tuples and strings, none in a cycle), and the collector would walk all of them again
    and again as they accumulate: a fifth of a first record's time. Reference counting still frees them."""
    was = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was:
            gc.enable()


def capture_project(config: Config, *, python_override: str | None = None, full: bool = False,
                    progress: HashProgress | None = None, numerics: bool = True,
                    recorded_folders: dict[str, FolderRecord] | None = None,
                    listings: bool = False) -> ProjectCapture:
    """Everything `record` writes and `check` compares, except analysis outputs.

    `recorded_folders` (the lock's data folders) lets an unchanged big folder be judged by stat alone;
    `listings` builds every data folder's listing object for the store (record)."""
    with _collector_paused():
        return _capture(config, python_override, full, progress, numerics, recorded_folders or {}, listings)


def _capture(config: Config, python_override: str | None, full: bool, progress: HashProgress | None, numerics: bool,
             recorded_folders: dict[str, FolderRecord], listings: bool) -> ProjectCapture:
    python, how = resolve_python(config.python, config.root, python_override)
    # runs while the files are walked and hashed (a check may have started it already: head_start.py)
    probe = head_start.probe_for(python, how, config.root) or ProbeRun(python, config.root, how)
    inspection = None
    stack = None
    try:
        cache = None if full else DigestCache()
        aside = SetAside.start(config, cache, recorded_folders) if not listings else None
        apart = Apart.start(config, cache) if listings else None
        # a record starts the numeric inspection now, to run while files are hashed; a check usually finds
        # its answer in the cache, and starts it only when it does not (importing NumPy and friends costs
        # CPU). So does a record whose workers digest the data: they keep every core busy
        if numerics and listings and apart is None:
            inspection = start_inspection(python, config.threads)
        try:
            walker = aside.walker if aside else apart.walker if apart else None
            data_files, code_files, unmatched = tracked_files(config, walker)
            scan = scan_imports([(rel, Path(f.path)) for rel, f in code_files.items()
                                 if rel.endswith((".py", ".ipynb"))])
            outputs = {out for a in config.analyses for out in a.outputs}

            def environment() -> Environment:
                got = environment_from_probe(probe.result(), config.root, python)
                return with_installed(got, digest_installed(
                    got, Path(config.root), cache=cache, excludes=config.exclude, skip=set(data_files) | outputs,
                    skip_below=set(aside.remembered) if aside else apart.walker.set_aside if apart else ()))

            env = None
            settled: dict[str, FolderRecord] = {}
            answers: list[Answer] = []
            if aside is not None:
                env = environment()  # while the workers take the stamps
                data_files, unmatched, settled = aside.finish(data_files, unmatched)
            if apart is not None:
                env = environment()  # while the workers digest their subfolders
                if numerics:
                    inspection = start_unless_known(python, env, config.threads, cache)
                data_files, unmatched, answers = apart.finish(data_files, unmatched, progress)
            data = fingerprint_data(data_files, str(config.root), cache=cache, recorded=recorded_folders,
                                    progress=progress, listings=listings, settled=settled, digested=answers)
            code = fingerprint_files(code_files, cache=cache)
            env = env or environment()  # after the hashing when nothing was set aside: the probe runs meanwhile
            if numerics:
                stack = finish_inspection(inspection, python, env, config.threads, cache)
        finally:
            for started in (aside, apart):
                if started is not None:
                    started.stop()
            if cache is not None:
                cache.close()
    finally:
        for run in (probe, inspection):
            if run is not None and run.proc.poll() is None:
                run.stop()
    declared = declared_requirements(Path(config.root))
    env = mark_used(env, used_closure(env, scan.modules, declared))
    env, requested_from = truthful_requested(env, set(scan.modules), declared)
    return ProjectCapture(env, python, data, code, scan.problems, unmatched, stack, frozenset(scan.modules),
                          requested_from)
