"""What changed in the environment since the record, as replay says it beside the outputs.

A replay is where a user asks "why did this number move?", so it lists the changes since the record
(interpreter, platform, packages and their installed files, the numeric stack) in one compact group of
`environment.drift` findings: each package change names the replayed analyses that use it, failing ones
first; changes no replayed analysis uses are counted in one line (`check` lists them). Information only:
the outputs decide the verdict.
"""

from __future__ import annotations

from collections.abc import Iterable

from holotype.compare.causes import used_distributions
from holotype.compare.environment import compare_interpreter, compare_packages, compare_platform
from holotype.compare.numerics import compare_numerics
from holotype.findings import Finding
from holotype.records import Environment, LockContents, NumericStack


def environment_drift(lock: LockContents, now: Environment, numerics: NumericStack | None,
                      replayed: Iterable[str], failing: Iterable[str]) -> list[Finding]:
    """The environment's changes since the record that matter to the replayed analyses, failing ones first."""
    failing = set(failing)
    users: dict[str, list[str]] = {}
    for name in sorted(set(replayed), key=lambda n: (n not in failing, n)):
        analysis = lock.analyses.get(name)
        if analysis is None:
            continue
        direct, indirect = used_distributions(analysis, lock)
        for dist in (*direct, *indirect):
            users.setdefault(dist, []).append(name)
    out: list[Finding] = []
    unused: set[str] = set()
    everyone = [f for f in compare_interpreter(lock.interpreter, now.interpreter)
                + compare_platform(lock.platform, now.platform)] + compare_numerics(lock.numerics, numerics)
    for f in compare_packages(lock.packages, now.packages, then="recorded", now="now", gone="not installed now"):
        who = users.get(f.subject)
        if not who:
            unused.add(f.subject)
            continue
        named = ", ".join(f"{n} (failed)" if n in failing else n for n in who[:4])
        more = f" and {len(who) - 4} more" if len(who) > 4 else ""
        text = f.message.replace(" (not used by the analysis)", "")
        out.append(Finding("environment", f.subject, "environment.drift", f"{text}; used by {named}{more}",
                           f.expected, f.actual))
    for f in everyone:
        out.append(Finding("environment", f.subject, "environment.drift", f"{f.message}; affects every analysis",
                           f.expected, f.actual))
    if unused:
        out.append(Finding("environment", "other packages", "environment.drift",
                           f"{len(unused)} other package{'s' if len(unused) != 1 else ''} changed that no replayed "
                           "analysis uses ('holotype check' lists them)"))
    return out
