"""Candidate environments for `pinpoint`: the analysis interpreter as it is, with some packages put back to
their recorded versions by folders placed ahead of site-packages on its import path, and packages added
since the record taken away by holotype's start-up hook.

Each (package, version) is installed once (`pip install --no-deps --target`), from holotype's wheel
cache first, then wherever the user's installer options say; a candidate is a PYTHONPATH made of some of
these folders. Imports and package metadata then both resolve to the folder's version. A package taken
away has its top-level modules refused at import and its distribution left out of importlib.metadata
(HOLOTYPE_HIDE_MODULES, HOLOTYPE_HIDE_DISTS). `versions_seen` asks the interpreter itself, started as
the analyses are, to prove both. Everything lives in one session folder under holotype's cache (never in
the project); a folder left by an interrupted session is removed by the next one.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import time
from collections.abc import Sequence
from pathlib import Path

from holotype.atomic import write_atomic
from holotype.errors import HolotypeError
from holotype.standards.installer import Installer, InstallerOptions
from holotype.standards.wheel_cache import wheel_cache

_SEEN = ("import importlib, importlib.metadata as m, json, sys\n"
         "out = {}\n"
         "for name in json.loads(sys.argv[1]):\n"
         "    try:\n"
         "        out[name] = m.version(name)\n"
         "    except m.PackageNotFoundError:\n"
         "        out[name] = None\n"
         "for module in json.loads(sys.argv[2]):\n"
         "    try:\n"
         "        importlib.import_module(module)\n"
         "        out['import ' + module] = 'imported'\n"
         "    except ImportError:\n"
         "        out['import ' + module] = None\n"
         "print(json.dumps(out))\n")


def overlay_root() -> Path:
    return wheel_cache().parent / "pinpoint"


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def remove_stale_sessions(project: Path, root: Path | None = None) -> int:
    """Remove session folders whose holotype process is gone (an interrupted pinpoint); how many.

    A session killed mid-run may have left a candidate's outputs in its project: when the session was for
    `project`, the outputs it saved first are put back. A stale session of another project keeps only those
    saved outputs (the candidate environments go), for that project's next pinpoint to put back."""
    root = root or overlay_root()
    removed = 0
    if not root.is_dir() or root.is_symlink():
        return 0
    for folder in root.iterdir():
        pid_text = folder.name.split("-", 1)[0]
        if not folder.is_dir() or folder.is_symlink() or not pid_text.isdigit() or _alive(int(pid_text)):
            continue
        saved = _saved_outputs(folder)
        if saved is not None and saved[0] != str(Path(project).resolve()) and Path(saved[0]).is_dir():
            for item in folder.iterdir():
                if item.name in (_SAVED, _SAVED_LIST):
                    continue
                if item.is_dir() and not item.is_symlink():
                    shutil.rmtree(item, ignore_errors=True)
                else:
                    item.unlink(missing_ok=True)
            continue
        if saved is not None and saved[0] == str(Path(project).resolve()):
            _put_back(Path(saved[0]), folder, saved[1])
        shutil.rmtree(folder, ignore_errors=True)
        removed += 1
    return removed


_SAVED, _SAVED_LIST = "saved-outputs", "saved-outputs.json"


def _saved_outputs(folder: Path) -> tuple[str, dict[str, str | None]] | None:
    try:
        doc = json.loads((folder / _SAVED_LIST).read_text(encoding="utf-8"))
        return str(doc["project"]), {str(k): (None if v is None else str(v)) for k, v in doc["outputs"].items()}
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        return None


def _put_back(project: Path, folder: Path, outputs: dict[str, str | None]) -> None:
    """The outputs as the failing replay left them (only inside the project, never through a link)."""
    base = project.resolve()
    for rel, kept in outputs.items():
        path = base / rel
        if base not in path.resolve().parents:
            continue
        if kept is None:
            if path.is_file() and not path.is_symlink():
                path.unlink()
            continue
        if not kept.isdigit():
            continue  # holotype names each saved output by its number: anything else is not its own
        try:
            data = (folder / _SAVED / kept).read_bytes()
        except OSError:
            continue
        if not path.is_symlink() and (not path.is_file() or path.read_bytes() != data):
            write_atomic(path, data)


class Overlays:
    """The session's install folders, one per (package, version)."""

    def __init__(self, python: str, options: InstallerOptions, requirements: dict[str, str] | None = None) -> None:
        """`requirements`: how to ask the installer for a package's recorded version where an exact pin
        is not enough (a git commit, an archive URL: standards/requirements.py); by default name==version."""
        self.python = python
        self.requirements = requirements or {}
        self.folder = overlay_root() / f"{os.getpid()}-{time.time_ns()}"
        self.folder.mkdir(parents=True)
        cache = wheel_cache()
        links = [str(cache)] if cache.is_dir() else []
        self.options = InstallerOptions([*links, *options.find_links], options.index_url, options.no_index)
        self.installer = Installer(python, self.folder / "install.log", self.options)
        self.installed: dict[tuple[str, str], Path] = {}

    def install(self, name: str, version: str) -> Path:
        key = (name, version)
        if key not in self.installed:
            target = self.folder / f"{name}-{version}"
            self.installer.run(f"installing {name} {version} for the candidate environments", "install",
                               "--no-deps", "--no-compile", "--quiet", "--target", str(target),
                               *self.options.args(), self.requirements.get(name, f"{name}=={version}"))
            self.installed[key] = target
        return self.installed[key]

    def python_path(self, reverted: dict[str, str]) -> str:
        """The import path that puts these packages back to these versions."""
        return os.pathsep.join(str(self.install(n, v)) for n, v in sorted(reverted.items()))

    def compose(self, env: dict[str, str], reverted: dict[str, str],
                hidden: dict[str, tuple[str, ...]]) -> dict[str, str]:
        """An analysis' variables for the candidate: `reverted` packages at those versions, `hidden` ones
        (name -> top-level modules) taken away. Holotype's hook folder stays first on the path."""
        out = dict(env)
        parts = [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p]
        path = self.python_path(reverted)
        out["PYTHONPATH"] = os.pathsep.join([*parts[:1], *([path] if path else []), *parts[1:]])
        for key in ("HOLOTYPE_HIDE_MODULES", "HOLOTYPE_HIDE_DISTS"):
            out.pop(key, None)
        if hidden:
            out["HOLOTYPE_HIDE_MODULES"] = ",".join(sorted({m for mods in hidden.values() for m in mods}))
            out["HOLOTYPE_HIDE_DISTS"] = ",".join(sorted(hidden))
        return out

    def versions_seen(self, names: list[str], env: dict[str, str], modules: Sequence[str] = (),
                      python: str | None = None) -> dict[str, str | None]:
        """The versions the interpreter itself reports, started with `env`; and for each of `modules`,
        "imported" or None under the key "import MODULE"."""
        proc = subprocess.run([python or self.python, "-c", _SEEN, json.dumps(names), json.dumps(list(modules))],
                              capture_output=True, text=True, env=env, stdin=subprocess.DEVNULL, timeout=120)
        if proc.returncode != 0:
            raise HolotypeError(f"the candidate environment does not start: {proc.stderr.strip()[-300:]}")
        seen: dict[str, str | None] = json.loads(proc.stdout)
        return seen

    def save_outputs(self, project: Path, saved: dict[str, bytes | None]) -> None:
        """Keep the project's outputs in the session folder first, so that a session killed mid-run has
        them put back by the next one (remove_stale_sessions)."""
        (self.folder / _SAVED).mkdir()
        names: dict[str, str | None] = {}
        for i, (rel, data) in enumerate(sorted(saved.items())):
            names[rel] = None if data is None else str(i)
            if data is not None:
                write_atomic(self.folder / _SAVED / str(i), data)
        write_atomic(self.folder / _SAVED_LIST, json.dumps({"project": str(Path(project).resolve()),
                                                             "outputs": names}))

    def put_back(self) -> None:
        """The project's outputs as they were saved (save_outputs)."""
        saved = _saved_outputs(self.folder)
        if saved is not None:
            _put_back(Path(saved[0]), self.folder, saved[1])

    def close(self, keep: bool) -> Path | None:
        if keep:
            return self.folder
        shutil.rmtree(self.folder, ignore_errors=True)
        return None
