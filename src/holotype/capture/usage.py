"""Which installed packages the analysis uses: imported or declared, closed over their requirements."""

from __future__ import annotations

import tomllib
from dataclasses import replace
from pathlib import Path

from holotype.errors import InputError
from holotype.records import Environment, PackageRecord
from holotype.safe_files import read_regular


def declared_requirements(root: Path) -> list[str]:
    """`[project] dependencies` from the project's pyproject.toml, if any."""
    path = root / "pyproject.toml"
    if not path.exists():
        return []
    try:
        doc = tomllib.loads(read_regular(path, limit=16 << 20).decode("utf-8"))
    except (InputError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError):
        return []  # the config loader reports a broken pyproject.toml where it matters
    deps = doc.get("project", {}).get("dependencies", []) if isinstance(doc.get("project"), dict) else []
    return [d for d in deps if isinstance(d, str)]


INSTRUMENT = "holotype"


def module_owners(env: Environment) -> dict[str, list[str]]:
    """Top-level import name -> distributions providing it."""
    owners: dict[str, list[str]] = {}
    for pkg in env.packages.values():
        # no top_level.txt (an editable install, a modern build backend): the name is the usual import name
        for mod in pkg.top_level or (pkg.name.replace("-", "_"),):
            owners.setdefault(mod, []).append(pkg.name)
    return owners


def used_closure(env: Environment, imported: set[str], declared: list[str]) -> set[str]:
    """Canonical names of the packages the code needs, following Requires-Dist with the target's markers."""
    from packaging.requirements import InvalidRequirement, Requirement
    from packaging.utils import canonicalize_name

    owners = module_owners(env)
    queue: list[tuple[str, frozenset[str]]] = []
    for mod in imported:
        if mod in env.stdlib and mod not in owners:
            continue
        queue.extend((name, frozenset()) for name in owners.get(mod, []))
    for text in declared:
        try:
            req = Requirement(text)
        except InvalidRequirement:
            continue
        if req.marker is None or req.marker.evaluate(dict(env.markers) or None):
            queue.append((canonicalize_name(req.name), frozenset(req.extras)))
    seen: set[tuple[str, frozenset[str]]] = set()
    used: set[str] = set()
    while queue:
        name, extras = queue.pop()
        if (name, extras) in seen or name not in env.packages:
            continue
        seen.add((name, extras))
        used.add(name)
        if name == INSTRUMENT:
            continue  # holotype is the instrument, not the analysis: its own dependencies are not the analysis'
        for text in env.packages[name].requires:
            try:
                req = Requirement(text)
            except InvalidRequirement:
                continue
            if req.marker is not None:
                marker_env = dict(env.markers)
                wanted = extras or frozenset({""})
                if not any(req.marker.evaluate({**marker_env, "extra": e}) for e in wanted):
                    continue
            queue.append((canonicalize_name(req.name), frozenset(req.extras)))
    return used


def mark_used(env: Environment, used: set[str]) -> Environment:
    """The same environment with each package's `used` flag set."""
    packages: dict[str, PackageRecord] = {
        name: replace(pkg, used=name in used) for name, pkg in env.packages.items()
    }
    return replace(env, packages=packages)


EVERYTHING_REQUESTED = 5  # with at least this many packages all marked requested, the markers say nothing


def truthful_requested(env: Environment, imported: set[str], declared: list[str]) -> tuple[Environment, str]:
    """Some installers mark every package as requested; then "requested" is derived from what the project
    declares and imports directly. Returns the environment and which source was used."""
    if len(env.packages) < EVERYTHING_REQUESTED or not all(p.requested for p in env.packages.values()):
        return env, "installer"
    from packaging.requirements import InvalidRequirement, Requirement
    from packaging.utils import canonicalize_name

    owners = module_owners(env)
    asked = {name for mod in imported for name in owners.get(mod, []) if name != INSTRUMENT}
    for text in declared:
        try:
            asked.add(canonicalize_name(Requirement(text).name))
        except InvalidRequirement:
            continue
    packages = {name: replace(pkg, requested=name in asked) for name, pkg in env.packages.items()}
    return replace(env, packages=packages), "declared dependencies and imports"
