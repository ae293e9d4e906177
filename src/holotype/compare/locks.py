"""Two lockfiles against each other: what changed between two records of the same project."""

from __future__ import annotations

from dataclasses import replace

from holotype.compare.digests import as_entries, compare_file_sets
from holotype.compare.environment import compare_interpreter, compare_packages, compare_platform
from holotype.compare.judgement import compare_judgement, rulebook_of
from holotype.compare.numerics import compare_numerics
from holotype.compare.outputs import compare_or_unreadable
from holotype.compare.source import Source
from holotype.errors import BaselineError
from holotype.findings import Finding
from holotype.records import LockContents, inputs_digest
from holotype.store import BaselineStore
from holotype.tolerance import RuleBook


def _logged_changes(a: LockContents, b: LockContents) -> dict[tuple[str, str], str]:
    """(output, new digest) -> the reason of the history entry in `b` (not in `a`) that made that change."""
    logged: dict[tuple[str, str], str] = {}
    for entry in b.history[len(a.history):]:
        for change in entry.changes:
            logged[(change.output, change.new)] = f"{entry.reason} ({entry.who}, {entry.when})"
    return logged


def _baseline_figures(out: str, old: str, new: str, size_old: int, size_new: int, rules: RuleBook,
                      store: BaselineStore | None) -> Finding | None:
    """The two baselines compared with replay's engine, when both objects are in the store."""
    if store is None or not (store.has(old) and store.has(new)):
        return None
    try:
        expected = Source.from_bytes(store.get(old, size_old), out, f"{out} (before)")
        actual = Source.from_bytes(store.get(new, size_new), out, f"{out} (after)")
    except BaselineError:
        return None
    judged = [f for f in compare_or_unreadable(out, expected, actual, rules) if f.kind != "output.layout"]
    return judged[0] if judged else None


def diff_locks(a: LockContents, b: LockContents, a_name: str = "A", b_name: str = "B",
               store: BaselineStore | None = None) -> list[Finding]:
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
    files = (compare_file_sets("data", as_entries(a.data, a.data_folders), as_entries(b.data, b.data_folders))
             + compare_file_sets("code", a.code, b.code))
    reasons = [f"{e.reason} ({e.who}, {e.when})" for e in b.history[len(a.history):]]
    # re-recorded by a logged record or adopt whose baselines were remade from these very data: said, with
    # why, not a failure (a `record --no-run` that kept baselines made from other data still fails)
    remade = bool(b.analyses) and all(rec.made_from is not None and rec.made_from == inputs_digest(b.data, rec.inputs,
                                                                                                    b.data_folders)
                                      for rec in b.analyses.values())
    if reasons and remade:
        files = [replace(f, kind="lockfile.logged", message=f"{f.message}; logged: {'; '.join(reasons)}")
                 for f in files]
    findings += files
    if a.project_seed != b.project_seed:
        findings.append(Finding("seed", "project", "seed.changed",
                                f"project seed {a.project_seed} in {a_name}, {b.project_seed} in {b_name}",
                                a.project_seed, b.project_seed))
    logged = _logged_changes(a, b)
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
                rules = rulebook_of(b.judgement) if b.judgement is not None else RuleBook()
                figures = _baseline_figures(out, o.sha256, n.sha256, o.size, n.size, rules, store)
                how = (f"{figures.message}" if figures is not None
                       else f"{o.size:,} → {n.size:,} bytes; objects not both in the store to compare")
                reason = logged.get((out, n.sha256))
                if reason is not None:
                    findings.append(Finding("output", out, "output.adopted",
                                            f"baseline replaced on purpose: {reason}; {how}", o.sha256, n.sha256,
                                            stats=figures.stats if figures is not None else None))
                else:
                    findings.append(Finding("output", out, "output.changed",
                                            f"baseline changed with no history entry: {how}", o.sha256, n.sha256,
                                            stats=figures.stats if figures is not None else None))
            if o is not None and n is not None and o.tolerance != n.tolerance:
                findings.append(Finding("output", out, "output.layout", f"tolerance {o.tolerance} → {n.tolerance}",
                                        o.tolerance, n.tolerance))
    if len(b.history) > len(a.history):
        for entry in b.history[len(a.history):]:
            findings.append(Finding("lockfile", "history", "lockfile.note",
                                    f"logged {entry.when} by {entry.who}: {entry.reason}"))
    return findings
