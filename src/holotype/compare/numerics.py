"""The recorded numeric stack against the one found now: libraries, kernels, SIMD, CPU, variables, threads."""

from __future__ import annotations

from holotype.findings import Finding
from holotype.phrasing import listed
from holotype.records import NativeLibrary, NumericStack


def _major_minor(version: str | None) -> tuple[str, ...]:
    return tuple((version or "").split(".")[:2])


def compare_numerics(old: NumericStack | None, new: NumericStack | None) -> list[Finding]:
    """Findings of the `numeric.*` kinds (their severities are in findings/policy.py)."""
    if old is None or new is None:
        if old is not None and new is None:
            return [Finding("numeric", "stack", "numeric.library",
                            "a numeric stack was recorded; none is found now (NumPy and friends no longer import "
                            "in the analysis interpreter)", list(old.imported), None)]
        return []
    findings: list[Finding] = []
    before = {lib.key: lib for lib in old.libraries}
    after = {lib.key: lib for lib in new.libraries}
    for key in sorted(set(before) | set(after)):
        a, b = before.get(key), after.get(key)
        if a is None or b is None:
            gone = a is not None
            lib = a if a is not None else b
            assert lib is not None
            state = "no longer loaded" if gone else "loaded now, not recorded"
            findings.append(Finding("numeric", key, "numeric.library",
                                    f"{lib.user_api} library {state} ({lib.file}, version {lib.version or 'unknown'})",
                                    _describe(a), _describe(b)))
            continue
        if a.version != b.version:
            major = _major_minor(a.version) != _major_minor(b.version)
            findings.append(Finding("numeric", key, "numeric.library" if major else "numeric.library_patch",
                                    f"version {a.version} recorded, {b.version} found", a.version, b.version))
        if a.architecture != b.architecture:
            findings.append(Finding("numeric", key, "numeric.kernel",
                                    f"CPU kernel {a.architecture} recorded, {b.architecture} picked now",
                                    a.architecture, b.architecture))
        if a.num_threads != b.num_threads:
            findings.append(Finding("numeric", key, "numeric.threads",
                                    f"{a.num_threads} threads recorded, {b.num_threads} now (the order of parallel "
                                    "sums can differ; set threads = 1 for bit-stable results)",
                                    a.num_threads, b.num_threads))
        if a.threading_layer != b.threading_layer:
            findings.append(Finding("numeric", key, "numeric.threads",
                                    f"threading layer {a.threading_layer} recorded, {b.threading_layer} now",
                                    a.threading_layer, b.threading_layer))
    for label, x, y in (("NumPy's detected SIMD extensions", old.numpy_cpu_features, new.numpy_cpu_features),
                        ("NumPy's dispatched SIMD targets", old.numpy_cpu_dispatch, new.numpy_cpu_dispatch),
                        ("the CPU's floating-point flags", old.cpu_flags, new.cpu_flags)):
        if set(x) != set(y):
            lost, gained = sorted(set(x) - set(y)), sorted(set(y) - set(x))
            parts = ([f"without {listed(lost)}"] if lost else []) + ([f"with {listed(gained)}"] if gained else [])
            findings.append(Finding("numeric", "simd", "numeric.simd", f"{label} differ: now {'; '.join(parts)}",
                                    list(x), list(y)))
    if (old.cpu_vendor, old.cpu_model) != (new.cpu_vendor, new.cpu_model):
        findings.append(Finding("numeric", "cpu", "numeric.cpu",
                                f"CPU {old.cpu_vendor} {old.cpu_model} recorded, {new.cpu_vendor} {new.cpu_model} now",
                                old.cpu_model, new.cpu_model))
    for name in sorted(set(old.variables) | set(new.variables)):
        a_val, b_val = old.variables.get(name), new.variables.get(name)
        if a_val != b_val:
            findings.append(Finding("numeric", name, "numeric.variable",
                                    f"{name}={a_val if a_val is not None else '(unset)'} recorded, "
                                    f"{b_val if b_val is not None else '(unset)'} now", a_val, b_val))
    if (old.numpy_blas, old.numpy_lapack) != (new.numpy_blas, new.numpy_lapack):
        findings.append(Finding("numeric", "numpy build", "numeric.library",
                                f"NumPy built against {old.numpy_blas} / {old.numpy_lapack} recorded, "
                                f"{new.numpy_blas} / {new.numpy_lapack} now", old.numpy_blas, new.numpy_blas))
    return findings


def _describe(lib: NativeLibrary | None) -> str | None:
    if lib is None:
        return None
    return f"{lib.internal_api} {lib.version or ''} {lib.architecture or ''}".strip()
