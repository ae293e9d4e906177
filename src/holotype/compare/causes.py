"""Why might an output have moved? A ranked list of recorded differences that can move one analysis' numbers.

This is a ranking of candidates, not proof (`holotype pinpoint` is meant to turn candidates into proof).
The order follows what is known to matter most, most specific first:

1. the analysis' data inputs (its declared `inputs`, else every data file), its seed, then code: your own
   changes;
2. the packages the analysis used (imported at run time, or marked used in the lock) whose version or
   origin changed, those it imported itself before their dependencies;
3. the native libraries the analysis loaded (BLAS/LAPACK/OpenMP): another version, kernel or thread count;
4. numerics variables and thread settings (OPENBLAS_CORETYPE, MKL_CBWR, OMP_NUM_THREADS, …);
5. CPU-level changes (SIMD extensions, the CPU model), then the interpreter.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from holotype.compare.digests import as_entries, compare_file_sets
from holotype.records import AnalysisRecord, Environment, FileRecord, FolderRecord, LockContents, NumericStack


@dataclass(frozen=True)
class Now:
    """What the replay's environment looks like, captured only when an output did not reproduce exactly."""

    environment: Environment
    data: dict[str, FileRecord]
    code: dict[str, FileRecord]
    numerics: NumericStack | None
    project_seed: int
    data_folders: dict[str, FolderRecord] = field(default_factory=dict)


def _as_files(files: dict[str, FileRecord], folders: dict[str, FolderRecord],
              inputs: set[str]) -> dict[str, FileRecord]:
    """An analysis' inputs (all data when it declares none), a folder entry standing as one file `folder/`."""
    return {p: r for p, r in as_entries(files, folders).items()
            if not inputs or p in inputs or (p.endswith("/") and any(i.startswith(p) for i in inputs))}


def used_distributions(analysis: AnalysisRecord, lock: LockContents) -> tuple[list[str], list[str]]:
    """(imported by the analysis itself, the rest it used): from the run-time modules, else the lock's `used`."""
    if analysis.observed:
        provides: dict[str, str] = {}
        for dist, record in lock.packages.items():
            for module in record.top_level or (dist.replace("-", "_"),):
                provides.setdefault(module, dist)
        direct = sorted({provides[m] for m in analysis.modules if m in provides})
        closure: set[str] = set()
        stack = list(direct)
        while stack:
            found = lock.packages.get(stack.pop())
            for req in found.requires if found is not None else ():
                dep = _requirement_name(req)
                if dep in lock.packages and dep not in closure and dep not in direct:
                    closure.add(dep)
                    stack.append(dep)
        return direct, sorted(closure)
    return [], sorted(n for n, p in lock.packages.items() if p.used)


def _requirement_name(req: str) -> str:
    from packaging.requirements import InvalidRequirement, Requirement
    from packaging.utils import canonicalize_name

    try:
        return str(canonicalize_name(Requirement(req).name))
    except InvalidRequirement:
        return ""


def candidate_causes(name: str, lock: LockContents, now: Now) -> list[str]:
    """The recorded differences that can move analysis `name`'s numbers, most likely first."""
    analysis = lock.analyses.get(name)
    if analysis is None:
        return []
    out: list[str] = []
    inputs = set(analysis.inputs)
    old_data = _as_files(lock.data, lock.data_folders, inputs)
    new_data = _as_files(now.data, now.data_folders, inputs)
    for f in compare_file_sets("data", old_data, new_data):
        if f.kind != "data.added" or not inputs:
            out.append(f"data {f.subject}: {f.message}")
    if lock.project_seed is not None and lock.project_seed != now.project_seed:
        out.append(f"seed: project seed {lock.project_seed} recorded, {now.project_seed} used")
    for f in compare_file_sets("code", lock.code, now.code):
        out.append(f"code {f.subject}: {f.message}")
    direct, indirect = used_distributions(analysis, lock)
    for group, how in ((direct, "imported by the analysis"), (indirect, "used by what it imports")):
        for dist in group:
            then, found = lock.packages[dist], now.environment.packages.get(dist)
            if found is None:
                out.append(f"package {dist} {then.version} ({how}): no longer installed")
            elif found.version != then.version:
                out.append(f"package {dist} {then.version} → {found.version} ({how})")
            elif found.origin != then.origin:
                out.append(f"package {dist} {then.version} ({how}): origin {then.origin.describe()} → "
                           f"{found.origin.describe()}")
            elif (then.files and found.files and then.files != found.files) or then.tree != found.tree:
                edited = [rel for rel in found.edited if rel not in then.edited] or [
                    rel for rel in sorted(then.tree.keys() | found.tree.keys())
                    if then.tree.get(rel) != found.tree.get(rel)]
                out.append(f"package {dist} {then.version} ({how}): its files changed"
                           + (f" ({', '.join(edited[:3])}{', …' if len(edited) > 3 else ''})" if edited else ""))
    old_stack, new_stack = lock.numerics, now.numerics
    if old_stack is not None and new_stack is not None:
        loaded = set(analysis.libraries) if analysis.observed else {lib.key for lib in old_stack.libraries}
        before = {lib.key: lib for lib in old_stack.libraries if lib.key in loaded}
        after = {lib.key: lib for lib in new_stack.libraries}
        for key, lib in sorted(before.items()):
            other = after.get(key)
            if other is None:
                out.append(f"native library {key} {lib.version}: not loaded now")
                continue
            changes = [f"{what} {a} → {b}" for what, a, b in (("version", lib.version, other.version),
                                                             ("kernel", lib.architecture, other.architecture),
                                                             ("threads", lib.num_threads, other.num_threads))
                       if a != b]
            if changes:
                out.append(f"native library {key} (loaded by the analysis): {', '.join(changes)}")
        if loaded:
            for var in sorted(set(old_stack.variables) | set(new_stack.variables)):
                a, b = old_stack.variables.get(var), new_stack.variables.get(var)
                if a != b:
                    out.append(f"variable {var}: {a or '(unset)'} → {b or '(unset)'}")
            if set(old_stack.numpy_cpu_features) != set(new_stack.numpy_cpu_features) \
                    or set(old_stack.cpu_flags) != set(new_stack.cpu_flags):
                out.append("CPU: other SIMD extensions or floating-point flags (FMA, AVX, …)")
            if old_stack.cpu_model != new_stack.cpu_model:
                out.append(f"CPU: {old_stack.cpu_model} → {new_stack.cpu_model}")
    then_it, now_it = lock.interpreter, now.environment.interpreter
    if (then_it.implementation, then_it.version) != (now_it.implementation, now_it.version):
        out.append(f"interpreter {then_it.implementation} {then_it.version} → {now_it.implementation} "
                   f"{now_it.version}")
    return out
