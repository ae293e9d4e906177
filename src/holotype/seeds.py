"""Seeds for analysis scripts. Standard library only: importable without holotype's other dependencies.

Inside `holotype record`/`replay`, each analysis process gets HOLOTYPE_SEED (its own seed),
HOLOTYPE_PROJECT_SEED and PYTHONHASHSEED. Run by hand, the project seed is read from
holotype.toml (or [tool.holotype] in pyproject.toml) in the current folder or above, so a
script behaves the same either way. A script that must not import holotype can do:

    seed = int(os.environ["HOLOTYPE_SEED"])
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path
from typing import Any

SEED_VARIABLE = "HOLOTYPE_SEED"
PROJECT_SEED_VARIABLE = "HOLOTYPE_PROJECT_SEED"
ANALYSIS_VARIABLE = "HOLOTYPE_ANALYSIS"


def derive_seed(project_seed: int, name: str) -> int:
    """First 4 bytes, big-endian, of SHA-256 of "<project seed>/<analysis name>" (ASCII): a uint32."""
    digest = hashlib.sha256(f"{project_seed}/{name}".encode("ascii")).digest()
    return int.from_bytes(digest[:4], "big")


def _seed_from_config(start: Path) -> int | None:
    import tomllib

    for folder in (start, *start.parents):
        for name, table in (("holotype.toml", None), ("pyproject.toml", ("tool", "holotype"))):
            path = folder / name
            if not path.is_file():
                continue
            try:
                doc: Any = tomllib.loads(path.read_text(encoding="utf-8"))
            except (OSError, ValueError):
                continue
            for key in table or ():
                doc = doc.get(key, {}) if isinstance(doc, dict) else {}
            if isinstance(doc, dict) and isinstance(doc.get("seed"), int) and not isinstance(doc["seed"], bool):
                return int(doc["seed"])
            if table is None:
                return None  # holotype.toml wins over pyproject.toml even without a seed
    return None


def project_seed() -> int:
    """The project seed: HOLOTYPE_PROJECT_SEED, else `seed` in the nearest holotype config."""
    value = os.environ.get(PROJECT_SEED_VARIABLE)
    if value is not None:
        return int(value)
    found = _seed_from_config(Path.cwd())
    if found is None:
        raise LookupError("no project seed: run under holotype, or set seed = N in holotype.toml")
    return found


def seed(name: str | None = None) -> int:
    """This analysis' seed (HOLOTYPE_SEED), or the seed holotype derives for analysis `name`."""
    if name is None:
        value = os.environ.get(SEED_VARIABLE)
        if value is not None:
            return int(value)
        name = os.environ.get(ANALYSIS_VARIABLE)
        if name is None:
            return project_seed()
    return derive_seed(project_seed(), name)


def rng(name: str | None = None) -> Any:
    """A NumPy Generator seeded with seed(name)."""
    try:
        import numpy as np
    except ImportError:
        raise ImportError("holotype.seeds.rng needs NumPy in the analysis environment; "
                          "use holotype.seeds.seed() with your own generator instead") from None
    return np.random.default_rng(seed(name))


def draw_seed() -> int:
    """A fresh project seed: positive and below 2**31, so every library that takes a seed accepts it."""
    import secrets

    return 1 + secrets.randbelow(2**31 - 1)
