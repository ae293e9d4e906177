"""`holotype pins --to requirements|pylock`: the locked packages in an open standard format."""

from __future__ import annotations

from pathlib import Path

from holotype.lockfile import LOCK_NAME, read_lock
from holotype.standards.pylock import export_pylock
from holotype.standards.requirements import export_requirements
from holotype.standards.wheel_cache import wheel_cache

TARGETS = ("requirements", "pylock")


def pin_packages(root: Path, to: str, find_links: list[Path] | None = None) -> str:
    """The text of requirements.txt pins or a pylock.toml for the project's lock."""
    lock = read_lock(Path(root) / LOCK_NAME)
    if to == "requirements":
        return export_requirements(lock, Path(root))
    # the wheels recreate kept are hashed too, so a recreated project needs no download
    return export_pylock(lock, [*(find_links or []), wheel_cache()], Path(root))
