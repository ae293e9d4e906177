"""holotype's own wheel cache: the wheels `recreate` fetched, kept by file name (whose tags and build say
which build it is), so a second recreate installs offline and `pins --to pylock` can hash them."""

from __future__ import annotations

import os
from pathlib import Path

from holotype.records import PackageRecord


def wheel_cache() -> Path:
    """$HOLOTYPE_CACHE_DIR/wheels, else `wheels` in the platform's user cache folder for holotype."""
    override = os.environ.get("HOLOTYPE_CACHE_DIR")
    if override:
        return Path(override) / "wheels"
    from platformdirs import user_cache_dir

    return Path(user_cache_dir("holotype", appauthor=False)) / "wheels"


def is_recorded_wheel(pkg: PackageRecord, filename: str) -> bool:
    """Whether a wheel file name (PEP 427) is the one the lock records for `pkg`: the same name and version,
    and where the lock knows them (from the installed WHEEL file) the same tags and build tag."""
    from packaging.utils import InvalidWheelFilename, canonicalize_name, parse_wheel_filename
    from packaging.version import InvalidVersion, Version

    try:
        name, version, build, tags = parse_wheel_filename(filename)
        wanted = Version(pkg.version)
    except (InvalidWheelFilename, InvalidVersion):
        return False
    if canonicalize_name(name) != pkg.name or version != wanted:
        return False
    if pkg.wheel_tags and {str(t) for t in tags} != set(pkg.wheel_tags):
        return False
    found_build = f"{build[0]}{build[1]}" if build else None
    return not ((pkg.wheel_tags or pkg.build) and found_build != pkg.build)  # a rebuilt `-1` wheel is another
