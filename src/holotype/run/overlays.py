"""Candidate environments for `pinpoint`: the analysis interpreter as it is, with some packages put back to
their recorded versions by folders placed ahead of site-packages on its import path.

Each (package, version) is installed once (`pip install --no-deps --target`), from holotype's wheel
cache first, then wherever the user's installer options say; a candidate is a PYTHONPATH made of some of
these folders. Imports and package metadata then both resolve to the folder's version, and `versions_seen`
asks the interpreter itself to prove it. Everything lives in one session folder under holotype's cache
(never in the project); a folder left by an interrupted session is removed by the next one.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import time
from pathlib import Path

from holotype.errors import HolotypeError
from holotype.standards.installer import Installer, InstallerOptions
from holotype.standards.wheel_cache import wheel_cache

_SEEN = ("import importlib.metadata as m, json, sys\n"
         "out = {}\n"
         "for name in sys.argv[1:]:\n"
         "    try:\n"
         "        out[name] = m.version(name)\n"
         "    except m.PackageNotFoundError:\n"
         "        out[name] = None\n"
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


def remove_stale_sessions(root: Path | None = None) -> int:
    """Remove session folders whose holotype process is gone (an interrupted pinpoint); how many."""
    root = root or overlay_root()
    removed = 0
    if not root.is_dir() or root.is_symlink():
        return 0
    for folder in root.iterdir():
        pid_text = folder.name.split("-", 1)[0]
        if folder.is_dir() and not folder.is_symlink() and pid_text.isdigit() and not _alive(int(pid_text)):
            shutil.rmtree(folder, ignore_errors=True)
            removed += 1
    return removed


class Overlays:
    """The session's install folders, one per (package, version)."""

    def __init__(self, python: str, options: InstallerOptions) -> None:
        self.python = python
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
                               *self.options.args(), f"{name}=={version}")
            self.installed[key] = target
        return self.installed[key]

    def python_path(self, reverted: dict[str, str]) -> str:
        """The import path that puts these packages back to these versions."""
        return os.pathsep.join(str(self.install(n, v)) for n, v in sorted(reverted.items()))

    def versions_seen(self, names: list[str], python_path: str) -> dict[str, str | None]:
        """The versions the interpreter itself reports with this import path."""
        env = {**os.environ, "PYTHONPATH": python_path}
        proc = subprocess.run([self.python, "-c", _SEEN, *names], capture_output=True, text=True, env=env,
                              stdin=subprocess.DEVNULL, timeout=120)
        if proc.returncode != 0:
            raise HolotypeError(f"the candidate environment does not start: {proc.stderr.strip()[-300:]}")
        seen: dict[str, str | None] = json.loads(proc.stdout)
        return seen

    def close(self, keep: bool) -> Path | None:
        if keep:
            return self.folder
        shutil.rmtree(self.folder, ignore_errors=True)
        return None
