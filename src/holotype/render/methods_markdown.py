"""The provenance appendix as Markdown."""

from __future__ import annotations

from holotype import __version__
from holotype.appendix import CAUTION, Provenance
from holotype.findings.summary import CAVEAT
from holotype.render.markdown import cell


def run_settings(prov: Provenance) -> list[str]:
    """The settings that shaped every run, in words (shared with the HTML appendix)."""
    threads = (f"BLAS/OpenMP threads pinned to {prov.threads} in every analysis" if prov.threads is not None
               else "BLAS/OpenMP threads not pinned (threads is not set)")
    globals_ = ("global generators of random and NumPy seeded at start-up (seed_globals = true)" if prov.seed_globals
                else "global generators not seeded by holotype (seed_globals = false)")
    return [threads, globals_]


def numeric_lines(prov: Provenance) -> list[str]:
    """The numeric stack in words (shared with the HTML appendix)."""
    stack = prov.lock.numerics
    if stack is None:
        return ["not recorded (no numeric package was installed in the analysis interpreter)"]
    lines = [f"{lib.user_api.upper()} {lib.internal_api} {lib.version or '(version unknown)'}, shipped by "
             f"{lib.bundled_by or lib.file}: kernel {lib.architecture or 'n/a'}, {lib.num_threads} thread(s), "
             f"{lib.threading_layer or 'n/a'} threading" for lib in stack.libraries]
    if stack.numpy_version:
        lines.append(f"NumPy {stack.numpy_version} built against {stack.numpy_blas or 'unknown'} "
                     f"(LAPACK {stack.numpy_lapack or 'unknown'}); SIMD baseline "
                     f"{', '.join(stack.numpy_cpu_baseline) or 'none'}, dispatched "
                     f"{', '.join(stack.numpy_cpu_dispatch) or 'none'}")
    lines.append(f"CPU: {stack.cpu_vendor} {stack.cpu_model}, {stack.logical_cpus} logical CPUs; "
                 f"floating-point flags {', '.join(stack.cpu_flags) or 'none recorded'}")
    if stack.variables:
        lines.append("Numerics variables: " + ", ".join(f"{k}={v}" for k, v in sorted(stack.variables.items())))
    lines.append(f"Inspected with {stack.inspection} after importing {', '.join(stack.imported)}")
    return lines


def render_methods_markdown(prov: Provenance) -> str:
    lock = prov.lock
    it, pf = lock.interpreter, lock.platform
    used = [lock.packages[n] for n in sorted(lock.packages) if lock.packages[n].used]
    unrelated = len(lock.packages) - len(used)
    out = [
        "# Computational methods and provenance", "",
        f"Recorded {lock.recorded} with holotype {lock.holotype or __version__}.", "",
        "## Environment", "",
        f"- Interpreter: {it.implementation} {it.version} ({cell(it.compiler)}; ABI {cell(it.abi or 'n/a')})",
        f"- Platform: {pf.system} {pf.release} on {pf.machine}; C library {pf.libc_text}",
        f"- Packages: {len(used)} used by the analysis (listed below); {unrelated} other installed packages "
        "recorded in holotype.lock", "",
        "| package | version | origin |", "|---|---|---|",
    ]
    out += [f"| {cell(p.name)} | {cell(p.version)} | {cell(p.origin.describe())} |" for p in used]
    out += ["", "## Data", "", "| file | bytes | SHA-256 |", "|---|---:|---|"]
    for path, rec in sorted(lock.data.items()):
        digest = rec.sha256 if rec.kind == "file" else f"symbolic link to {rec.target}"
        out.append(f"| `{cell(path)}` | {rec.size:,} | `{cell(digest)}` |")
    for path, folder in sorted(lock.data_folders.items()):
        out.append(f"| `{cell(path)}/` ({folder.files:,} files) | {folder.bytes:,} | listing `{folder.listing}` |")
    out += ["", "## Seeds", "", f"Project seed: {lock.project_seed}. Each analysis seed is the first four bytes "
            "(big-endian) of SHA-256 of \"<project seed>/<analysis name>\".", ""]
    out += [f"- {cell(name)}: {rec.seed}" for name, rec in sorted(lock.analyses.items())]
    out += ["", "## Run settings", ""] + [f"- {cell(line)}" for line in run_settings(prov)]
    out += ["", "## Numerical environment", ""] + [f"- {cell(line)}" for line in numeric_lines(prov)]
    out += ["", "## Analyses and results", ""]
    if prov.last_replay_when:
        out.append(f"Latest replay: {cell(prov.last_replay_text)}.")
    else:
        out.append("No replay has been recorded on this machine yet (run `holotype replay`).")
    out += ["", "| analysis | output | SHA-256 | tolerance | latest replay |", "|---|---|---|---|---|"]
    for line in prov.outputs:
        out.append(f"| {cell(line.analysis)} | `{cell(line.path)}` | `{line.sha256[:16]}…` | {cell(line.tolerance)} | "
                   f"{cell(line.result)} |")
    moved = [line for line in prov.outputs if line.candidates]
    if moved:
        out += ["", f"### What may have moved outputs that did not reproduce exactly ({CAVEAT})", ""]
        for line in moved:
            out.append(f"- `{cell(line.path)}`: " + "; ".join(f"{i}. {cell(c)}"
                                                             for i, c in enumerate(line.candidates, start=1)))
    out += ["", "## Caution", "", CAUTION, ""]
    return "\n".join(out)
