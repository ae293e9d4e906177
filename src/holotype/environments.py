"""Fresh virtual environments with exactly a lock's packages, installed without dependency resolution:
`recreate` checks the one it builds against the lock; `pinpoint` builds candidates with it where
composition on the current environment cannot express one."""

from __future__ import annotations

import glob
import os
import shutil
import subprocess
import sys
from pathlib import Path

from holotype.atomic import write_atomic
from holotype.capture.environment import capture_environment, venv_interpreter
from holotype.errors import HolotypeError, InstallError
from holotype.findings import Finding
from holotype.records import LockContents, PackageRecord
from holotype.standards.installer import Installer, InstallerOptions
from holotype.standards.requirements import local_folder, local_url, requirement_line
from holotype.standards.wheel_cache import is_recorded_wheel, wheel_cache


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


def _bundled_wheels(python: str) -> Path:
    """The folder of the wheels the interpreter's ensurepip installs (its own pip among them)."""
    proc = subprocess.run([python, "-c", "import ensurepip, os; print(os.path.dirname(ensurepip.__file__))"],
                          capture_output=True, text=True, timeout=60)
    return Path(proc.stdout.strip() or ".") / "_bundled"


def _matching_wheel(folder: Path, pkg: PackageRecord) -> Path | None:
    """The recorded wheel of `pkg` in `folder` (exact version, and tags and build where the lock has them)."""
    return next((p for p in sorted(folder.glob("*.whl")) if is_recorded_wheel(pkg, p.name)), None) \
        if folder.is_dir() else None


def _offered(folder: Path, pkg: PackageRecord) -> str:
    from packaging.utils import InvalidWheelFilename, canonicalize_name, parse_wheel_filename

    for path in sorted(folder.glob("*.whl")):
        try:
            name, version, _build, _tags = parse_wheel_filename(path.name)
        except InvalidWheelFilename:
            continue
        if canonicalize_name(name) == pkg.name and str(version) == pkg.version:
            return path.name
    return "none"


def _editable_folder(name: str, url: str, root: Path, folders: dict[str, str]) -> Path:
    """Where an editable or local-folder package's source is on this machine: a --use-folder mapping, else
    the recorded path (relative to the project, or under the home folder)."""
    for recorded, local in folders.items():
        if url.rstrip("/") == recorded.rstrip("/") or url.endswith("/" + recorded.strip("./").rstrip("/")):
            return Path(local).expanduser().absolute()
    found = local_folder(url, root)
    if not found.is_dir():
        raise HolotypeError(f"{name} was installed from the local folder {url} (here: {found}), which does not "
                            f"exist; pass --use-folder {url}=PATH to say where its source is on this machine")
    return found


def build_environment(lock: LockContents, root: Path, target: Path, base: str, installer: InstallerOptions,
                      folders: dict[str, str]) -> tuple[str, list[Finding]]:
    """A virtual environment in `target` (new or empty) with exactly `lock`'s packages; its interpreter and
    what was noted on the way. `recreate` checks it against the lock; `pinpoint` builds candidates with it."""
    created = subprocess.run([base, "-m", "venv", str(target)], capture_output=True, text=True)
    if created.returncode != 0:
        raise HolotypeError(f"cannot create a virtual environment with {base}: "
                            f"{(created.stderr.strip().splitlines() or ['unknown error'])[-1]}")
    venv_python = str(venv_interpreter(target))
    pip = Installer(venv_python, target / "holotype-install.log", installer)
    findings: list[Finding] = []
    upgraded = pip.run("bringing the new environment's installer up to date", "install", "--upgrade", "pip",
                       *installer.args(), fatal=False)
    if upgraded:
        findings.append(Finding("lockfile", str(target), "lockfile.note", f"kept the bundled installer: {upgraded}"))
    present = capture_environment(venv_python, root).packages
    cache = wheel_cache()
    cache.mkdir(parents=True, exist_ok=True)
    index = [p for name, p in sorted(lock.packages.items()) if p.origin.kind == "index" and name != "pip"
             and not (name in present and present[name].version == p.version)]
    missing = [p for p in index if _matching_wheel(cache, p) is None]
    if missing:
        req_file = target / "holotype-download.txt"
        write_atomic(req_file, "".join(f"{p.name}=={p.version}\n" for p in missing))
        pip.run("fetching the locked wheels", "download", "--no-deps", "--prefer-binary", "-d", str(cache),
                "-r", str(req_file), *installer.args())
    # only the chosen wheels, offered to the installer as a package source of its own: it installs them as
    # index packages (no direct-URL record), and cannot pick another build lying in the cache
    chosen = target / ".holotype-wheels"
    chosen.mkdir()
    files: list[str] = []
    for pkg in index:
        wheel = _matching_wheel(cache, pkg)
        if wheel is None:
            raise InstallError(f"{pkg.name} {pkg.version}: the package source offers {_offered(cache, pkg)}, not the "
                               f"recorded wheel (tags {', '.join(pkg.wheel_tags) or 'unknown'}"
                               f"{', build ' + pkg.build if pkg.build else ''}); holotype does not install a "
                               "look-alike (point --find-links at the recorded wheel)")
        try:
            os.link(wheel, chosen / wheel.name)
        except OSError:
            shutil.copyfile(wheel, chosen / wheel.name)
        files.append(f"{pkg.name}=={pkg.version}")
    others: list[str] = []
    for name, pkg in sorted(lock.packages.items()):
        o = pkg.origin
        if o.kind == "editable" and o.url:
            others += ["-e", str(_editable_folder(name, o.url, root, folders))]
        elif o.kind == "directory" and o.url:
            others.append(str(_editable_folder(name, o.url, root, folders)))
        elif o.kind == "vcs" and o.url and o.commit:
            # the URL form every installer version reads (older ones refuse 'name @ git+file://…')
            sub = f"&subdirectory={o.subdirectory}" if o.subdirectory else ""
            others.append(f"{o.vcs}+{local_url(o.url, root)}@{o.commit}#egg={name}{sub}")
        elif o.kind in ("vcs", "archive"):
            others.append(requirement_line(pkg, root))
    if files:
        pip.run("installing the locked wheels", "install", "--no-deps", "--no-compile", "--no-index",
                "--find-links", str(chosen), *files)
    if others:  # built from source: first in the installer's own build environment, else with what is installed
        what = "installing the locked git, editable and local packages"
        if pip.run(what, "install", "--no-deps", "--no-compile", *others, *installer.args(), fatal=False):
            pip.run(what, "install", "--no-deps", "--no-compile", "--no-build-isolation", *others,
                    *installer.args())
    shutil.rmtree(chosen, ignore_errors=True)
    locked_pip = lock.packages.get("pip")
    if locked_pip is not None and locked_pip.origin.kind == "index":
        kept = _matching_wheel(cache, locked_pip) or _matching_wheel(_bundled_wheels(venv_python), locked_pip)
        source = ["--no-index", "--find-links", str(kept.parent)] if kept else list(installer.args())
        kept_back = pip.run(f"installing the locked pip {locked_pip.version}", "install", "--no-deps",
                            "--no-compile", f"pip=={locked_pip.version}", *source, fatal=False)
        if kept_back:
            findings.append(Finding("lockfile", str(target), "lockfile.note", f"kept the newer installer: {kept_back}"))
    findings.append(Finding("lockfile", str(target), "lockfile.note",
                            f"built with {base}; installed {len(files)} wheel(s) from holotype's wheel cache and "
                            f"{len(others) - others.count('-e')} other package(s) without dependency resolution; "
                            f"the installer's output is in {pip.log}"))
    return venv_python, findings
