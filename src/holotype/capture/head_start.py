"""A head start for `check` and `record`: the interpreter probe and the workers begin before the command
has loaded the rest of holotype or read the lock.

The probe (environment.py) depends only on the configuration, so it starts as soon as the project's
configuration is read, for the interpreter that configuration names; capture_project adopts it when it
resolves the same interpreter the same way.

Loading holotype's modules and reading the lock takes a single core a few tenths of a second, and only
then does a check know which big folders to stamp (folder_stamps.py). The folders are almost always the
ones the previous check of the same project asked for, so each check leaves a *note* in the user's cache
folder: the exact worker requests it made, with the identity (inode, size, times) of the project's lock
and configuration files then. The next check, as soon as it knows the project folder, starts workers for
the noted requests when those files are unchanged; StampWorkers adopts them only when the requests it
builds itself are exactly the noted ones, and stops them otherwise. So a stale note costs a little work
and never an answer: a worker's answer depends only on its request and the files it stats.

`record` starts the probe the same way, and its digest workers (folder_digests.py) as soon as the
configuration names the data subfolders to hand out; Apart adopts them only for exactly the same request
(the walk's rules, the cache) and subfolders, and stops them otherwise.

Only holotype's own worker module is ever started from a note (never a program the note names), and a
note naming another project folder is ignored. HOLOTYPE_NO_HEAD_START=1 turns the workers' head start off
(to measure what it saves).
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from holotype.capture.environment import ProbeRun

NOTE_LIMIT = 1 << 20  # a note is a few kilobytes; anything bigger is not one
_WATCHED = ("holotype.lock", "holotype.toml", "pyproject.toml")
_started: dict[str, tuple[list[dict[str, Any]], list[subprocess.Popen[bytes]]]] = {}
_probes: dict[tuple[str, str, str], ProbeRun] = {}  # (interpreter, how it was chosen, project folder)
_ahead: list[Any] = []  # a record's digest workers, started as soon as its configuration was read


def _note_path(root: str) -> Path:
    from holotype.capture.digest_cache import default_cache_path

    name = hashlib.sha256(root.encode("utf-8", "surrogateescape")).hexdigest()[:32]
    return default_cache_path().parent / "head-start" / f"{name}.json"


def _identity(root: str) -> list[list[int] | None]:
    """The identity of the files that decide which folders a check stamps."""
    out: list[list[int] | None] = []
    for name in _WATCHED:
        try:
            st = os.lstat(os.path.join(root, name))
        except OSError:
            out.append(None)
            continue
        out.append([st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns])
    return out


def worker_command(module: str = "holotype.capture.folder_stamps") -> tuple[list[str], dict[str, str]]:
    """The command line of one of holotype's worker modules (a stamp worker unless told), and its environment
    (holotype's own import path first)."""
    import holotype

    package_home = str(Path(holotype.__file__).resolve().parents[1])
    env = {**os.environ,
           "PYTHONPATH": os.pathsep.join([package_home, *filter(None, [os.environ.get("PYTHONPATH")])])}
    return [sys.executable, "-S", "-m", module], env  # -S: no site-packages needed


def spawn(request: dict[str, Any]) -> subprocess.Popen[bytes]:
    """One stamp worker, given its request."""
    argv, env = worker_command()
    proc = subprocess.Popen(argv, stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, env=env)
    assert proc.stdin is not None
    try:
        proc.stdin.write(json.dumps(request).encode())
        proc.stdin.close()
    except OSError:
        stop([proc])
        raise
    return proc


def stop(procs: list[subprocess.Popen[bytes]]) -> None:
    for proc in procs:
        if proc.poll() is None:
            proc.kill()
        proc.wait()


def _read_note(root: str) -> list[dict[str, Any]] | None:
    try:
        path = _note_path(root)
        with open(path, "rb") as fh:
            raw = fh.read(NOTE_LIMIT + 1)
        note = json.loads(raw) if len(raw) <= NOTE_LIMIT else None
    except (OSError, ValueError, ImportError):
        return None
    if not isinstance(note, dict) or note.get("root") != root or note.get("identity") != _identity(root):
        return None
    requests = note.get("requests")
    if not isinstance(requests, list) or not all(isinstance(r, dict) and r.get("root") == root and _inside(
            r.get("folders")) for r in requests):
        return None
    return requests


def _inside(folders: Any) -> bool:
    """Project-relative folders that stay inside the project (as the lock's folder entries are)."""
    return isinstance(folders, list) and all(
        isinstance(f, str) and f and not os.path.isabs(f) and ".." not in f.split("/") for f in folders)


def begin_probe(project: Path, python_override: str | None = None) -> None:
    """Start the probe of the interpreter the project's configuration names. Any problem is left to the
    command itself, which meets it again and says what is wrong."""
    from holotype.capture.environment import ProbeRun, resolve_python
    from holotype.config import load_config
    from holotype.errors import HolotypeError

    try:
        config = load_config(project)
        python, how = resolve_python(config.python, config.root, python_override)
        key = (python, how, os.path.realpath(config.root))
        if key not in _probes:
            _probes[key] = ProbeRun(python, config.root, how)
    except (HolotypeError, OSError):
        return


def probe_for(python: str, how: str, root: Path) -> ProbeRun | None:
    """The probe started ahead for this interpreter, chosen this way, for this project; None if none was."""
    return _probes.pop((python, how, os.path.realpath(root)), None)


def begin(project: Path) -> None:
    """Start the workers the last check of `project` asked for, when its lock and configuration are unchanged."""
    root = os.path.realpath(project)
    if root in _started or os.environ.get("HOLOTYPE_NO_HEAD_START"):
        return
    requests = _read_note(root)
    if not requests:
        return
    procs: list[subprocess.Popen[bytes]] = []
    try:
        for request in requests:
            procs.append(spawn(request))
    except OSError:
        stop(procs)
        return
    _started[root] = (requests, procs)


def begin_early(args: list[str]) -> None:
    """For `holotype check ARGS` as typed (before the command framework and the configuration are loaded):
    start the workers the last check of its project asked for. The project is the folder -C/--project
    names, else guessed cheaply as the nearest folder at or above this one with a holotype.toml or a
    pyproject.toml. A wrong guess or a misread option costs only the work: the note must match that
    folder's files, and the check adopts workers only for exactly its own requests. Anything not taken is
    stopped at exit."""
    given: str | None = None
    for i, arg in enumerate(args):
        if arg in ("--full", "--help", "-h", "--"):
            return
        if arg in ("-C", "--project"):
            if i + 1 == len(args):
                return
            given = args[i + 1]
        elif arg.startswith("--project="):
            given = arg.partition("=")[2]
        elif arg.startswith("-C") and len(arg) > 2:
            given = arg[2:]
    import atexit

    atexit.register(finish)
    try:
        if given is not None:
            begin(Path(given))
            return
        here = os.getcwd()
        for folder in (here, *(str(p) for p in Path(here).parents)):
            if any(os.path.isfile(os.path.join(folder, name)) for name in _WATCHED[1:]):
                begin(Path(folder))
                return
    except (OSError, ValueError):
        return  # no folder here, or a name no path can hold: the command itself says what is wrong


def take(root: str, requests: list[dict[str, Any]]) -> list[subprocess.Popen[bytes]] | None:
    """The workers started ahead for exactly these requests; None (and any started for others stopped)."""
    noted = _started.pop(root, None)
    if noted is None:
        return None
    if noted[0] != requests:
        stop(noted[1])
        return None
    return noted[1]


def remember(root: str, requests: list[dict[str, Any]]) -> None:
    """Leave the note for the next check (written whole, or not at all)."""
    note = {"root": root, "identity": _identity(root), "requests": requests}
    try:
        path = _note_path(root)
        path.parent.mkdir(parents=True, exist_ok=True)
        try:
            if json.loads(path.read_bytes()) == note:
                return
        except (OSError, ValueError):
            pass
        part = path.with_name(f"{path.name}.{os.getpid()}.part")
        try:
            part.write_text(json.dumps(note), encoding="utf-8")
            os.replace(part, path)
        finally:
            part.unlink(missing_ok=True)
    except (OSError, ImportError):
        pass  # an optimisation only


def keep_ahead(started: Any) -> None:
    """Keep workers started ahead (anything with a `stop()`) for the command to take, or `finish` to stop."""
    _ahead.append(started)


def take_ahead(wanted: Callable[[Any], bool]) -> Any:
    """The workers kept ahead that are `wanted`, or None; any others are stopped."""
    while _ahead:
        started = _ahead.pop()
        if wanted(started):
            return started
        started.stop()
    return None


def finish() -> None:
    """Stop what was started ahead and not taken: workers (the command found no folder to set aside, or
    stopped early on an error) and probes."""
    while _started:
        stop(_started.popitem()[1][1])
    while _ahead:
        _ahead.pop().stop()
    while _probes:
        probe = _probes.popitem()[1]
        if probe.proc.poll() is None:
            probe.stop()
