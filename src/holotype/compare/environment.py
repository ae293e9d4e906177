"""Recorded environment against the one found now: interpreter, platform, packages."""

from __future__ import annotations

from holotype.findings import Finding
from holotype.records import Interpreter, PackageRecord, PlatformInfo


def compare_interpreter(old: Interpreter, new: Interpreter) -> list[Finding]:
    out: list[Finding] = []
    if old.implementation != new.implementation:
        out.append(Finding("interpreter", "implementation", "interpreter.implementation",
                           f"implementation {old.implementation} recorded, {new.implementation} found",
                           old.implementation, new.implementation))
    if old.minor != new.minor:
        out.append(Finding("interpreter", "version", "interpreter.minor",
                           f"Python {old.version} recorded, {new.version} found (a different minor version)",
                           old.version, new.version))
    elif old.version != new.version:
        out.append(Finding("interpreter", "version", "interpreter.patch",
                           f"Python {old.version} recorded, {new.version} found (patch release)",
                           old.version, new.version))
    for attr in ("compiler", "abi"):
        a, b = getattr(old, attr), getattr(new, attr)
        if a != b and old.minor == new.minor:
            out.append(Finding("interpreter", attr, "interpreter.build", f"{attr} {a!r} recorded, {b!r} found", a, b))
    return out


def compare_platform(old: PlatformInfo, new: PlatformInfo) -> list[Finding]:
    out: list[Finding] = []
    for attr, kind in (("system", "platform.system"), ("machine", "platform.machine"), ("release", "platform.release")):
        a, b = getattr(old, attr), getattr(new, attr)
        if a != b:
            out.append(Finding("platform", attr, kind, f"{attr} {a} recorded, {b} found", a, b))
    if (old.libc, old.libc_version) != (new.libc, new.libc_version):
        out.append(Finding("platform", "libc", "platform.libc",
                           f"C library {old.libc_text} recorded, {new.libc_text} found", old.libc_text, new.libc_text))
    return out


def _direction(old: str, new: str) -> str:
    from packaging.version import InvalidVersion, Version

    try:
        a, b = Version(old), Version(new)
    except InvalidVersion:
        return "changed"
    return "upgraded" if b > a else "downgraded" if b < a else "changed"


def _names(paths: list[str], limit: int = 5) -> str:
    shown = ", ".join(paths[:limit])
    return shown + (f" and {len(paths) - limit} more" if len(paths) > limit else "")


def _contents(rec: PackageRecord, found: PackageRecord, kind: str, role: str, then: str, now: str) -> list[Finding]:
    """The same version with other contents: installed files edited, or a local install's source folder."""
    out: list[Finding] = []
    name = rec.name
    if rec.wheel_tags and found.wheel_tags and (set(rec.wheel_tags) != set(found.wheel_tags) or
                                                rec.build != found.build):
        def wheel(p: PackageRecord) -> str:
            return ", ".join(p.wheel_tags) + (f" (build {p.build})" if p.build else "")

        out.append(Finding("package", name, kind, f"another build of {rec.version}: wheel {wheel(rec)} {then}, "
                           f"{wheel(found)} {now}{role}", wheel(rec), wheel(found)))
    elif rec.files and found.files and rec.files != found.files:  # (another build has other files anyway)
        edited = [rel for rel in found.edited if rel not in rec.edited]
        if edited:
            text = (f"{len(edited)} installed file{'s' if len(edited) != 1 else ''} changed since {then} "
                    f"(they differ from what the installer wrote): {_names(edited)}{role}")
        else:
            text = (f"installed files differ from those {then}, at the same version {rec.version} "
                    f"(reinstalled from another build?){role}")
        out.append(Finding("package", name, kind, text, rec.files[:12], found.files[:12]))
    if (rec.tree or found.tree) and rec.tree != found.tree:
        changed = sorted(rel for rel in rec.tree.keys() & found.tree.keys() if rec.tree[rel] != found.tree[rel])
        added = sorted(found.tree.keys() - rec.tree.keys())
        removed = sorted(rec.tree.keys() - found.tree.keys())
        parts = [f"{word} {_names(paths)}" for word, paths in (("modified", changed), ("added", added),
                                                                ("removed", removed)) if paths]
        if found.origin.kind == "editable":
            text = f"the source folder of this editable install (the code it runs) changed: {'; '.join(parts)}{role}"
            out.append(Finding("package", name, kind, text, f"{len(rec.tree)} files {then}",
                               f"{len(found.tree)} files {now}"))
        else:
            text = (f"the folder this package was installed from changed: {'; '.join(parts)} "
                    "(the installed copy did not; a reinstall would give other code)")
            out.append(Finding("package", name, "package.source_folder", text, f"{len(rec.tree)} files {then}",
                               f"{len(found.tree)} files {now}"))
    return out


def compare_packages(old: dict[str, PackageRecord], new: dict[str, PackageRecord],
                     then: str = "recorded", now: str = "found", gone: str = "not installed") -> list[Finding]:
    """Drift of every recorded package; its kind depends on whether the project uses it (then or now:
    a package the code has started to import since the record counts as used)."""
    out: list[Finding] = []
    for name in sorted(old):
        rec = old[name]
        used = rec.used or (name in new and new[name].used)
        kind = "package.used" if used else "package.unrelated"
        role = "" if used else " (not used by the analysis)"
        found = new.get(name)
        if found is None:
            out.append(Finding("package", name, kind, f"version {rec.version} {then}, {gone}{role}",
                               rec.version, None))
            continue
        if found.version != rec.version:
            out.append(Finding("package", name, kind,
                               f"version {rec.version} {then}, {found.version} {now} "
                               f"({_direction(rec.version, found.version)}){role}", rec.version, found.version))
        else:
            out += _contents(rec, found, kind, role, then, now)
        if rec.installer and found.installer and rec.installer != found.installer:
            out.append(Finding("package", name, "package.installer",
                               f"installed by {rec.installer} {then}, by {found.installer} {now}",
                               rec.installer, found.installer))
        if found.origin != rec.origin:
            out.append(Finding("package", name, kind,
                               f"origin {rec.origin.describe()} {then}, {found.origin.describe()} {now}{role}",
                               rec.origin.describe(), found.origin.describe()))
    for name in sorted(set(new) - set(old)):
        out.append(Finding("package", name, "package.added", f"{name} {new[name].version} {now}, not {then}",
                           None, new[name].version))
    return out
