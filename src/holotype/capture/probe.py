"""Runs INSIDE the target interpreter and prints one JSON document describing it.

Standard library only, and valid on Python 3.8 and newer: analysis environments lag
behind the interpreter holotype itself runs on. Do not import holotype from here.
"""

import json
import os
import platform
import re
import sys
import sysconfig

PROBE_FORMAT = 1


def _stdlib_names():
    names = getattr(sys, "stdlib_module_names", None)
    if names is not None:
        return sorted(names)
    # Python < 3.10: list what lives in the standard library folder, plus built-ins.
    import pkgutil

    found = set(sys.builtin_module_names)
    stdlib = sysconfig.get_paths().get("stdlib")
    folders = [p for p in (stdlib, os.path.join(stdlib or "", "lib-dynload")) if p and os.path.isdir(p)]
    for info in pkgutil.iter_modules(folders):
        if info.name != "site-packages":
            found.add(info.name)
    return sorted(found)


def _headers(text):
    """Name, Version and Requires-Dist from a METADATA text: the header block only, without the
    email parser (which is the slow part of importlib.metadata)."""
    name = version = None
    requires = []
    last = None
    for line in text.splitlines():
        if not line:
            break  # the body (long description) starts here
        if line[0] in " \t":  # a folded continuation (may be all white space)
            if last == "requires" and requires:
                requires[-1] += " " + line.strip()
            continue
        key, _, value = line.partition(":")
        key = key.strip().lower()
        value = value.strip()
        last = None
        if key == "name" and name is None:
            name = value
        elif key == "version" and version is None:
            version = value
        elif key == "requires-dist":
            requires.append(value)
            last = "requires"
    return name, version, requires


def _top_level_names(dist):
    try:
        text = dist.read_text("top_level.txt")
    except Exception:
        text = None
    names = set()
    if text:
        for line in text.splitlines():
            line = line.strip().replace("/", ".")
            if line:
                names.add(line.split(".")[0])
        return sorted(names)
    try:
        record = dist.read_text("RECORD") or ""
    except Exception:
        record = ""
    heads = set()
    for row in record.splitlines():
        head, slash, _ = row.partition("/")
        if slash and "," not in head and '"' not in head and "\\" not in head:
            heads.add(head)  # a file in folder `head`: most rows share it, so it is judged once below
            continue
        path = row.rsplit(",", 2)[0].strip('"') if row.count(",") >= 2 else row
        parts = path.replace("\\", "/").split("/")
        first = parts[0]
        if len(parts) == 1:
            if first.endswith(".py"):
                names.add(first[:-3])
            elif first.endswith((".so", ".pyd")):
                names.add(first.split(".")[0])
        else:
            heads.add(first)
    for first in heads:
        if first.endswith((".dist-info", ".egg-info", ".data")) or first in ("..", "__pycache__", ""):
            continue
        if first.isidentifier():
            names.add(first)
    return sorted(names)


def _wheel_facts(dist):
    """The WHEEL file's tags (one per `Tag:` line) and build tag, as the installer copied it from the wheel."""
    try:
        text = dist.read_text("WHEEL") or ""
    except Exception:
        text = ""
    tags = []
    build = None
    for line in text.splitlines():
        key, _, value = line.partition(":")
        key, value = key.strip().lower(), value.strip()
        if key == "tag" and value:
            tags.append(value)
        elif key == "build" and value:
            build = value
    return sorted(set(tags)), build


def _search_path():
    """sys.path as the analyses see it. holotype runs this probe isolated (-I), which drops the user's
    site-packages; an analysis run normally has it (outside a virtual environment), so add it back."""
    path = list(sys.path)
    if sys.flags.isolated and sys.prefix == getattr(sys, "base_prefix", sys.prefix) \
            and not os.environ.get("PYTHONNOUSERSITE"):
        import site

        user = site.getusersitepackages()
        if isinstance(user, str) and os.path.isdir(user) and user not in path:
            path.append(user)
    return path


class _Found:
    """A metadata folder found on the search path, read as importlib.metadata's PathDistribution reads it."""

    def __init__(self, path):
        self._path = path

    def read_text(self, filename):
        try:
            with open(os.path.join(self._path, filename), encoding="utf-8") as fh:
                return fh.read()
        except (FileNotFoundError, IsADirectoryError, NotADirectoryError, PermissionError):
            return None


def _joined(root, child):
    """str(pathlib.Path(root, child)), as importlib.metadata names the folder, without loading pathlib for
    the usual plain absolute folder."""
    if os.path.isabs(root) and root == os.path.normpath(root) and not root.startswith("//") \
            and ".." not in root.split(os.sep):
        return os.path.join(root, child)
    import pathlib

    return str(pathlib.Path(root, child))


def _found_on(entry):
    """The metadata folders importlib.metadata finds in one search-path folder, in its order (grouped by
    normalised name, each group in listing order); None when the entry is not a plain folder (a zip
    file, an .egg folder), which importlib.metadata itself then reads."""
    if not isinstance(entry, str) or os.path.basename(entry).lower().endswith(".egg"):
        return None
    try:
        children = os.listdir(entry or ".")
    except OSError:
        return None if os.path.isfile(entry) else []
    groups = {}
    for child in children:
        low = child.lower()
        if low.endswith((".dist-info", ".egg-info")):
            name = low.rpartition(".")[0].partition("-")[0]
            key = re.sub(r"[-_.]+", "-", name).lower().replace("-", "_")
            groups.setdefault(key, []).append(child)
    return [_Found(_joined(entry, child)) for group in groups.values() for child in group]


def _discovered():
    """Every distribution on the search path, as importlib.metadata.distributions would list them. Plain
    folders are listed here (importing importlib.metadata costs more than the rest of the probe); the
    standard library lists the rest, and everything when another finder on sys.meta_path lists
    distributions of its own."""
    from importlib.machinery import PathFinder

    path = _search_path()
    others = [f for f in sys.meta_path if f is not PathFinder and getattr(f, "find_distributions", None)]
    if others:
        from importlib import metadata

        return list(metadata.distributions(path=path))
    found = []
    for entry in path:
        here = _found_on(entry)
        if here is None:
            from importlib import metadata

            here = list(metadata.distributions(path=[entry]))
        found.extend(here)
    return found


def _distributions():
    seen = set()
    result = []
    for dist in _discovered():
        try:
            text = dist.read_text("METADATA") or dist.read_text("PKG-INFO") or ""
        except Exception:
            text = ""
        name, version, requires = _headers(text)
        if not name or not version:
            continue
        key = name.lower()
        if key in seen:  # the first one on sys.path is the one imports see
            continue
        seen.add(key)
        installer = dist.read_text("INSTALLER")
        direct_url = dist.read_text("direct_url.json")
        try:
            requested = dist.read_text("REQUESTED") is not None
        except Exception:
            requested = False
        try:
            origin = json.loads(direct_url) if direct_url else None
        except ValueError:
            origin = {"invalid": direct_url[:200]}
        tags, build = _wheel_facts(dist)
        result.append(
            {
                "name": name,
                "version": version,
                "installer": (installer or "").strip() or None,
                "requested": requested,
                "requires": requires,
                "top_level": _top_level_names(dist),
                "direct_url": origin,
                "location": str(getattr(dist, "_path", "") or "") or None,  # the .dist-info folder
                "wheel_tags": tags,
                "build": build,
            }
        )
    return result


def _libc():
    try:
        name, version = platform.libc_ver()
    except Exception:
        name, version = "", ""
    return name or None, version or None


def _marker_environment():
    # The PEP 508 marker variables, computed as packaging computes them.
    info = sys.implementation
    version = f"{info.version.major}.{info.version.minor}.{info.version.micro}"
    if info.version.releaselevel != "final":
        version += info.version.releaselevel[0] + str(info.version.serial)
    return {
        "implementation_name": info.name,
        "implementation_version": version,
        "os_name": os.name,
        "platform_machine": platform.machine(),
        "platform_release": platform.release(),
        "platform_system": platform.system(),
        "platform_version": platform.version(),
        "python_full_version": platform.python_version(),
        "platform_python_implementation": platform.python_implementation(),
        "python_version": ".".join(platform.python_version_tuple()[:2]),
        "sys_platform": sys.platform,
    }


def describe():
    libc_name, libc_version = _libc()
    info = sys.implementation
    return {
        "probe_format": PROBE_FORMAT,
        "interpreter": {
            "implementation": info.name,
            "version": platform.python_version(),
            "compiler": platform.python_compiler(),
            "abi": sysconfig.get_config_var("SOABI"),
            "executable": sys.executable,
        },
        "platform": {
            "system": platform.system(),
            "release": platform.release(),
            "machine": platform.machine(),
            "libc": libc_name,
            "libc_version": libc_version,
        },
        "markers": _marker_environment(),
        "stdlib": _stdlib_names(),
        "distributions": _distributions(),
    }


if __name__ == "__main__":
    sys.stdout.write(json.dumps(describe()))
