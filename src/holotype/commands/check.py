"""`holotype check`: the project as it is now against holotype.lock, running nothing."""

from __future__ import annotations

from pathlib import Path

from holotype.capture.fingerprints import HashProgress
from holotype.findings import Judgement
from holotype.verify import verify_project


def check_project(root: Path, *, strict: bool = False, full: bool = False, python: str | None = None,
                  progress: HashProgress | None = None) -> Judgement:
    """Compare interpreter, platform, packages, data, code, seeds and analyses with the lock."""
    return verify_project(root, strict=strict, full=full, python=python, progress=progress)
