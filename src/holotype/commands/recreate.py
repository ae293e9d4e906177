"""`holotype recreate DIR`: a fresh virtual environment matching the lock, then a check against it."""

from __future__ import annotations

import glob
import os
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

from holotype.atomic import write_atomic
from holotype.capture.environment import capture_environment, venv_interpreter
from holotype.errors import HolotypeError, InstallError
from holotype.findings import Finding, Judgement
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.records import LockContents
from holotype.standards.requirements import requirement_line
from holotype.verify import verify_project


@dataclass
class InstallerOptions:
    find_links: list[str] = field(default_factory=list)
    index_url: str | None = None
    no_index: bool = False

    def args(self) -> list[str]:
        out: list[str] = []
        for link in self.find_links:
            out += ["--find-links", link]
        if self.index_url:
            out += ["--index-url", self.index_url]
        if self.no_index:
            out.append("--no-index")
        return out


def _version_of(exe: str) -> str | None:
    try:
        proc = subprocess.run([exe, "-c", "import platform; print(platform.python_version())"], capture_output=True,
                              text=True, timeout=30)
    except (OSError, subprocess.TimeoutExpired):
        return None
    return proc.stdout.strip() if proc.returncode == 0 else None


def interpreter_candidates(minor: str) -> list[str]:
    """Interpreters on PATH and in the usual per-version install folders."""
    names = [f"python{minor}", "python3", "python"]
    found: list[str] = [sys.executable]
    for folder in os.environ.get("PATH", "").split(os.pathsep):
        for name in names:
            path = os.path.join(folder, name)
            if os.access(path, os.X_OK) and not os.path.isdir(path):
                found.append(path)
    home = os.path.expanduser("~")
    for pattern in (f"{home}/.pyenv/versions/{minor}*/bin/python{minor}", f"/usr/bin/python{minor}",
                    f"/usr/local/bin/python{minor}", f"/opt/python*/bin/python{minor}",
                    f"{home}/.local/share/uv/python/cpython-{minor}*/bin/python{minor}",
                    f"/Library/Frameworks/Python.framework/Versions/{minor}/bin/python{minor}"):
        found += sorted(glob.glob(pattern))
    return list(dict.fromkeys(found))


def find_interpreter(lock: LockContents) -> str:
    """An interpreter of exactly the locked version, or a clear refusal naming it."""
    wanted = lock.interpreter.version
    for exe in interpreter_candidates(lock.interpreter.minor):
        if _version_of(exe) == wanted:
            return exe
    raise HolotypeError(f"no Python {wanted} found on PATH or in the usual install folders; install it, "
                        "or pass --python PATH to use another interpreter")


def recreate_environment(root: Path, target: Path, *, python: str | None = None,
                        installer: InstallerOptions | None = None) -> Judgement:
    """Create `target`, install every locked package at its exact version and origin (no resolution), check."""
    root = Path(root)
    lock = read_lock(root / LOCK_NAME)
    target = Path(target).absolute()
    if target.exists() and (not target.is_dir() or any(target.iterdir())):
        raise HolotypeError("must be a new or empty folder", target)
    base = python or find_interpreter(lock)
    installer = installer or InstallerOptions()
    created = subprocess.run([base, "-m", "venv", str(target)], capture_output=True, text=True)
    if created.returncode != 0:
        raise HolotypeError(f"cannot create a virtual environment with {base}: "
                            f"{(created.stderr.strip().splitlines() or ['unknown error'])[-1]}")
    venv_python = str(venv_interpreter(target))
    present = capture_environment(venv_python, root).packages
    lines = []
    for name in sorted(lock.packages):
        pkg = lock.packages[name]
        if name in present and present[name].version == pkg.version and pkg.origin.kind == "index":
            continue  # the fresh environment already has it (pip itself, usually)
        if pkg.origin.kind in ("directory", "editable") and pkg.origin.url:
            local = os.path.expanduser(pkg.origin.url.removeprefix("file://"))
            if not os.path.isdir(local):
                raise HolotypeError(f"{name} was installed from the local folder {local}, which does not exist here")
        lines.append(requirement_line(pkg))
    findings: list[Finding] = []
    if lines:
        req_file = target / "holotype-requirements.txt"
        write_atomic(req_file, "\n".join(lines) + "\n")
        proc = subprocess.run([venv_python, "-m", "pip", "install", "--disable-pip-version-check", "--no-deps",
                               "-r", str(req_file), *installer.args()], capture_output=True, text=True)
        if proc.returncode != 0:
            tail = [ln for ln in proc.stderr.strip().splitlines() if ln.strip()][-1:] or ["unknown error"]
            raise InstallError(f"installing the locked packages into {target} failed: {tail[0]}")
    findings.append(Finding("lockfile", str(target), "lockfile.note",
                            f"built with {base}; installed {len(lines)} package(s) without dependency resolution"))
    checked = verify_project(root, command="recreate", python=venv_python)
    return Judgement("recreate", tuple(findings) + checked.findings, notes=checked.notes, warnings=checked.warnings)
