"""holotype's own wheel cache: the wheels `recreate` fetched, kept by file name (whose tags and build say
which build it is), so a second recreate installs offline and `pins --to pylock` can hash them."""

from __future__ import annotations

import os
from pathlib import Path


def wheel_cache() -> Path:
    """$HOLOTYPE_CACHE_DIR/wheels, else `wheels` in the platform's user cache folder for holotype."""
    override = os.environ.get("HOLOTYPE_CACHE_DIR")
    if override:
        return Path(override) / "wheels"
    from platformdirs import user_cache_dir

    return Path(user_cache_dir("holotype", appauthor=False)) / "wheels"
