"""Running an interpreter's own installer (pip) with the options a user gave, its output kept in one log."""

from __future__ import annotations

import subprocess
from dataclasses import dataclass, field
from pathlib import Path

from holotype.atomic import write_atomic
from holotype.errors import InstallError


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


class Installer:
    """Runs the new environment's installer, keeping all of its output in one log named in any failure."""

    def __init__(self, python: str, log: Path, options: InstallerOptions) -> None:
        self.python, self.log, self.options = python, log, options
        self.text: list[str] = []

    def run(self, what: str, *args: str, fatal: bool = True) -> str | None:
        """Run `pip ARGS`; on failure raise (or return) one line with the installer's first error line."""
        argv = [self.python, "-m", "pip", "--disable-pip-version-check", *args]
        proc = subprocess.run(argv, capture_output=True, text=True, stdin=subprocess.DEVNULL)
        self.text += [f"$ {' '.join(argv)}", proc.stdout, proc.stderr]
        write_atomic(self.log, "\n".join(self.text))
        if proc.returncode == 0:
            return None
        lines = [ln.strip() for ln in (proc.stderr + "\n" + proc.stdout).splitlines() if ln.strip()]
        first = next((ln for ln in lines if ln.startswith("ERROR:")), None) or (lines[-1] if lines else "no output")
        message = f"{what} failed: {first[:400]} (the installer's full output: {self.log})"
        if fatal:
            raise InstallError(message)
        return message
