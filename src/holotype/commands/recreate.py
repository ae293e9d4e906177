"""`holotype recreate DIR`: a fresh virtual environment matching the lock, then a check against it."""

from __future__ import annotations

from pathlib import Path

from holotype.environments import build_environment, find_interpreter
from holotype.errors import HolotypeError
from holotype.findings import Judgement
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.standards.installer import InstallerOptions
from holotype.verify import verify_project


def recreate_environment(root: Path, target: Path, *, python: str | None = None,
                        installer: InstallerOptions | None = None, folders: dict[str, str] | None = None) -> Judgement:
    """Create `target` and install every locked package exactly as recorded (no dependency resolution), then check.

    Index packages come as the recorded wheels: exact version, and the recorded wheel tags and build where the
    lock has them; a look-alike (another build or platform tag) is refused. Wheels are kept in holotype's
    wheel cache, so a second recreate of the same lock installs offline. Git packages install at the recorded
    commit, editable packages as editable from their source folder, local folders and files relative to the
    project. The new environment's installer is first brought up to date where the package source offers a
    newer one (an old bundled pip cannot read every kind of requirement)."""
    root = Path(root)
    lock = read_lock(root / LOCK_NAME)
    target = Path(target).absolute()
    if target.exists() and (not target.is_dir() or any(target.iterdir())):
        raise HolotypeError("must be a new or empty folder", target)
    venv_python, findings = build_environment(lock, root, target, python or find_interpreter(lock),
                                              installer or InstallerOptions(), folders or {})
    checked = verify_project(root, command="recreate", python=venv_python, lock=lock)
    return Judgement("recreate", tuple(findings) + checked.findings, notes=checked.notes, warnings=checked.warnings)
