"""The one error root: anything a user can cause that leaves holotype unable to judge (exit code 2).

`HolotypeError` carries its exit code and its own `show()`: one line on stderr, control characters
escaped, never a traceback (the command line calls it). It does not import the command framework, so
the worker processes that import the walk (folder_stamps.py) start quickly.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import IO, Any

from holotype.phrasing import one_line
from holotype.redaction import redact


class HolotypeError(Exception):
    """A problem with the user's input that stops a command; printed as one line, exit code 2."""

    exit_code = 2

    def __init__(self, message: str, path: Path | str | None = None) -> None:
        self.path = one_line(str(path)) if path is not None else None
        self.detail = one_line(redact(message))
        self.message = f"{self.path}: {self.detail}" if self.path else self.detail
        super().__init__(self.message)

    def __str__(self) -> str:
        return self.message

    def show(self, file: IO[Any] | None = None) -> None:
        stream = file if file is not None else sys.stderr
        stream.write(f"holotype: {one_line(self.message)}\n")
        stream.flush()


class ConfigError(HolotypeError):
    """holotype.toml or [tool.holotype] is unreadable or invalid."""


class ToleranceError(ConfigError):
    """A tolerance setting (in the config or a compare flag) is not valid; the message names it."""


class SeedError(ConfigError):
    """No project seed can be found or derived."""


class LockfileError(HolotypeError):
    """holotype.lock is unreadable, truncated, invalid or from a newer holotype."""


class InputError(HolotypeError):
    """A file given to a command cannot be read or parsed."""


class UnreadableOutput(InputError):
    """A compared file cannot be parsed in its format; `label` names it."""

    def __init__(self, message: str, label: str) -> None:
        self.label = label
        self.reason = one_line(message)
        super().__init__(message, label)


class BaselineError(HolotypeError):
    """A baseline object is missing, unreadable or does not match its digest."""


class WriteError(HolotypeError, OSError):
    """A file holotype had to write could not be written (disk full, read-only folder); names the file."""


class InstallError(HolotypeError):
    """Building an environment (recreate) failed; the message carries the installer's reason."""
