"""Two lockfiles against each other: what changed between two records of the same project."""

from __future__ import annotations

from holotype.compare.digests import compare_file_sets
from holotype.compare.environment import compare_interpreter, compare_packages, compare_platform
from holotype.compare.judgement import compare_judgement
from holotype.compare.numerics import compare_numerics
from holotype.findings import Finding
from holotype.records import LockContents


def diff_locks(a: LockContents, b: LockContents, a_name: str = "A", b_name: str = "B") -> list[Finding]:
    """Interpreter, platform, packages, data, code, seeds and baselines that differ from `a` to `b`."""
    findings: list[Finding] = []
    findings += compare_interpreter(a.interpreter, b.interpreter)
    findings += compare_platform(a.platform, b.platform)
    findings += compare_packages(a.packages, b.packages, then=f"in {a_name}", now=f"in {b_name}",
                                 gone=f"not in {b_name}")
    findings += compare_numerics(a.numerics, b.numerics)
    outputs = [out for rec in (*a.analyses.values(), *b.analyses.values()) for out in rec.outputs]
    findings += compare_judgement(a.judgement, b.judgement, sorted(set(outputs)), then=f"in {a_name}",
                                  now=f"in {b_name}")
    findings += compare_file_sets("data", a.data, b.data)
    findings += compare_file_sets("code", a.code, b.code)
    if a.project_seed != b.project_seed:
        findings.append(Finding("seed", "project", "seed.changed",
                                f"project seed {a.project_seed} in {a_name}, {b.project_seed} in {b_name}",
                                a.project_seed, b.project_seed))
    for name in sorted(set(a.analyses) | set(b.analyses)):
        old, new = a.analyses.get(name), b.analyses.get(name)
        if old is None or new is None:
            where = b_name if old is None else a_name
            findings.append(Finding("analysis", name, "analysis.changed", f"recorded only in {where}",
                                    None if old is None else old.command, None if new is None else new.command))
            continue
        if old.command != new.command:
            findings.append(Finding("analysis", name, "analysis.changed", f"command '{old.command}' → '{new.command}'",
                                    old.command, new.command))
        if old.seed != new.seed:
            findings.append(Finding("seed", name, "seed.changed", f"seed {old.seed} → {new.seed}", old.seed, new.seed))
        for out in sorted(set(old.outputs) | set(new.outputs)):
            o, n = old.outputs.get(out), new.outputs.get(out)
            if o is None or n is None:
                findings.append(Finding("output", out, "output.changed",
                                        f"baseline only in {b_name if o is None else a_name}",
                                        None if o is None else o.sha256, None if n is None else n.sha256))
            elif o.sha256 != n.sha256:
                findings.append(Finding("output", out, "output.changed",
                                        f"baseline changed ({o.size:,} → {n.size:,} bytes)", o.sha256, n.sha256))
            if o is not None and n is not None and o.tolerance != n.tolerance:
                findings.append(Finding("output", out, "output.layout", f"tolerance {o.tolerance} → {n.tolerance}",
                                        o.tolerance, n.tolerance))
    if len(b.history) > len(a.history):
        for entry in b.history[len(a.history):]:
            findings.append(Finding("lockfile", "history", "lockfile.note",
                                    f"adopted {entry.when} by {entry.who}: {entry.reason}"))
    return findings
