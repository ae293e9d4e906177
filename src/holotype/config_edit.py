"""Small, careful edits to the user's config file (text-level, so comments and layout survive)."""

from __future__ import annotations

import re
from pathlib import Path

from holotype.atomic import write_atomic
from holotype.errors import ConfigError


def add_seed(source: Path, seed: int) -> None:
    """Insert `seed = N` into holotype.toml (top level) or into the [tool.holotype] table of pyproject.toml."""
    text = source.read_text(encoding="utf-8")
    line = f"seed = {seed}  # project seed, drawn by holotype record; change it only on purpose\n"
    if source.name == "pyproject.toml":
        match = re.search(r"^\[tool\.holotype\][ \t]*(#.*)?\r?\n", text, re.MULTILINE)
        if match is None:
            raise ConfigError("cannot find the [tool.holotype] header to add the seed under; add seed = N by hand",
                              source)
        new = text[:match.end()] + line + text[match.end():]
    else:
        # before the first table header so the key stays top-level
        match = re.search(r"^\s*\[", text, re.MULTILINE)
        pos = match.start() if match else len(text)
        prefix = text[:pos]
        if prefix and not prefix.endswith("\n"):
            prefix += "\n"
        new = prefix + line + ("\n" if match else "") + text[pos:]
    write_atomic(source, new)
