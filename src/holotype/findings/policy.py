"""Policy in one place: which kind of finding is a failure, a warning or information.

A project overrides any entry with a [policy] table in its config, e.g.
`"package.unrelated" = "fail"`; `--strict` turns every remaining warning into a failure.
"""

from __future__ import annotations

from collections.abc import Iterable

from holotype.findings.finding import Finding

SEVERITIES = ("fail", "warn", "info")
SEVERITY_ORDER = {s: i for i, s in enumerate(SEVERITIES)}

DEFAULT_SEVERITY: dict[str, str] = {
    # interpreter and platform
    "interpreter.implementation": "fail",
    "interpreter.minor": "fail",
    "interpreter.patch": "warn",
    "interpreter.build": "warn",
    "platform.system": "fail",
    "platform.machine": "fail",
    "platform.libc": "warn",
    "platform.release": "info",
    # packages: "used" = imported by the project's code or declared, and all they require
    "package.used": "fail",
    "package.unrelated": "warn",
    "package.added": "warn",
    "package.installer": "info",  # the same package, installed by another installer
    "package.edited": "warn",  # at record: installed files already differ from the installer's RECORD
    "package.source_folder": "warn",  # the folder a non-editable local install was built from changed
    # data and code fingerprints
    "data.changed": "fail",
    "data.missing": "fail",
    "data.added": "warn",
    "data.renamed": "fail",
    "data.unreadable": "fail",
    "data.unstable": "fail",
    "data.listing": "fail",
    # pinpoint: the cause found for outputs that still do not reproduce, and what the search could not vary
    "pinpoint.cause": "fail",
    "pinpoint.nondeterministic": "fail",
    "pinpoint.unexplained": "fail",
    "pinpoint.unfinished": "fail",
    "pinpoint.not_varied": "info",
    "pinpoint.searched": "info",
    "code.changed": "warn",
    "code.missing": "warn",
    "code.added": "warn",
    "code.unreadable": "warn",
    "code.unstable": "warn",
    "code.unparsable": "info",
    # the judgement itself: tolerances, rules, threads, seed_globals, policy (as recorded vs now)
    "judgement.loosened": "fail",  # a change that lets more through must not pass the gate silently
    "judgement.tightened": "warn",
    "judgement.changed": "warn",
    # seeds, analyses and outputs
    "seed.changed": "fail",
    "analysis.failed": "fail",
    "analysis.missing": "fail",
    "analysis.changed": "warn",
    "analysis.nondeterministic": "fail",
    "analysis.stale": "fail",  # baselines made from other data than the lock records (record --no-run after a change)
    "analysis.baselines_older": "warn",  # said by record --no-run when it keeps baselines made from other data
    "analysis.plan": "info",
    "environment.drift": "info",  # replay: what changed since the record that the replayed analyses use
    "analysis.ran": "info",
    "analysis.left_children": "warn",  # the analysis left processes running; holotype stopped them
    "output.mismatch": "fail",
    "output.match": "info",
    "output.missing": "fail",
    "output.extra": "warn",
    "output.shape": "fail",
    "output.layout": "info",
    "output.baseline": "fail",
    "output.changed": "fail",
    "output.adopted": "info",  # a baseline replaced by a logged record or adopt (diff)
    "output.unreadable": "fail",
    "output.recorded_only": "info",  # an output a rule marks record_only changed: its digest is kept, not compared
    "output.rule": "fail",  # a rule key the output's format cannot honour (key on JSON, say): never ignored
    "output.foreign_write": "fail",  # an analysis wrote a file another analysis declares as its output
    # the numeric stack: native libraries, kernels, SIMD, CPU, numerics variables (docs/numerics.md)
    "numeric.library": "warn",  # another BLAS/LAPACK/OpenMP vendor or major.minor version, added or gone
    "numeric.library_patch": "info",  # the same library at another patch version
    "numeric.kernel": "info",  # the CPU kernel the library picked at run time
    "numeric.simd": "info",  # SIMD extensions NumPy detected or dispatches, the CPU's floating-point flags
    "numeric.cpu": "info",
    "numeric.threads": "info",  # thread counts or threading layer of a native library
    "numeric.variable": "warn",  # OPENBLAS_CORETYPE, MKL_CBWR, OMP_NUM_THREADS, …
    # notes about the lockfile and what a command did
    "lockfile.note": "info",
    "lockfile.logged": "info",  # diff: data or code re-recorded by a logged record or adopt
}


def apply_policy(findings: Iterable[Finding], overrides: dict[str, str] | None = None,
                 *, strict: bool = False) -> tuple[Finding, ...]:
    """Set each finding's severity from its kind; unknown kinds are failures, to be safe."""
    table = {**DEFAULT_SEVERITY, **(overrides or {})}
    out = []
    for f in findings:
        severity = table.get(f.kind, "fail")
        if f.ceiling is not None and SEVERITY_ORDER[severity] < SEVERITY_ORDER[f.ceiling]:
            severity = f.ceiling  # a rule set how bad a failing comparison of this output is
        if strict and severity == "warn":
            severity = "fail"
        out.append(f.with_severity(severity))
    return tuple(out)
