"""`holotype pinpoint`: after a failed replay, which recorded difference moves which output.

The differences searched are the packages whose version changed since the record, and those removed since
(put back for a candidate). Each candidate is the analysis interpreter as it is now with some of them put
back to their recorded versions (run/overlays.py); the failing analyses run in it with their recorded
seeds, and their outputs are judged against the baselines by the same engine and rules as `replay`. The
search (search.py) tries the likely causes first and proves its answer both ways. A package added since
the record cannot be taken away by a folder on the import path: it stays applied, and the report says so,
as it does for data, code and seed changes (the user's own changes, never varied).

The project's outputs are put back as the failing replay left them, and the lock and baselines are only
read; the candidate folders are removed at the end (or kept with `keep`).
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from holotype.atomic import write_atomic
from holotype.capture.project import capture_project
from holotype.compare.causes import Now, candidate_causes
from holotype.compare.digests import as_entries, compare_file_sets
from holotype.compare.runs import compare_two_runs, compare_with_baselines
from holotype.config import load_config
from holotype.errors import HolotypeError
from holotype.findings import Finding, Judgement
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.records import RunResult
from holotype.run.overlays import Overlays, remove_stale_sessions
from holotype.run.plan import Plan, make_plan
from holotype.run.runner import make_runner
from holotype.search import SearchResult, smallest_cause
from holotype.standards.installer import InstallerOptions
from holotype.store import ProjectStore

FAILING = ("output.mismatch", "output.shape", "output.missing", "output.unreadable")


@dataclass(frozen=True)
class PackageChange:
    name: str
    recorded: str | None  # None: added since the record
    now: str | None  # None: removed since the record

    def describe(self) -> str:
        if self.now is None:
            return f"{self.name} {self.recorded} removed"
        if self.recorded is None:
            return f"{self.name} {self.now} added"
        return f"{self.name} {self.recorded} → {self.now}"


def _failing_outputs(doc: dict[str, object]) -> list[str]:
    findings = doc.get("findings")
    if not isinstance(findings, list):
        return []
    return sorted({str(f.get("subject")) for f in findings if isinstance(f, dict) and f.get("severity") == "fail"
                   and f.get("kind") in FAILING})


def _snapshot(root: Path, outputs: list[str]) -> dict[str, bytes | None]:
    out: dict[str, bytes | None] = {}
    for rel in outputs:
        path = root / rel
        out[rel] = path.read_bytes() if path.is_file() and not path.is_symlink() else None
    return out


def _restore(root: Path, saved: dict[str, bytes | None]) -> None:
    for rel, data in saved.items():
        path = root / rel
        if data is None:
            if path.is_file() and not path.is_symlink():
                path.unlink()
        elif not path.is_file() or path.read_bytes() != data:
            write_atomic(path, data)


def pinpoint_project(root: Path, *, max_runs: int = 32, keep: bool = False,
                     installer: InstallerOptions | None = None,
                     say: Callable[[str], None] | None = None) -> Judgement:
    """Find the smallest set of package differences that moves the outputs the last replay failed on."""
    root = Path(root)
    say = say or (lambda _text: None)
    config = load_config(root)
    lock = read_lock(root / LOCK_NAME)
    store = ProjectStore(root)
    last = store.last_replay()
    if not last:
        raise HolotypeError("no replay to explain yet: run 'holotype replay' first", root)
    failing = _failing_outputs(last)
    if not failing:
        return Judgement("pinpoint", (), notes=("the last replay reproduced every output: nothing to pinpoint",),
                         warnings=config.warnings)
    names = [name for name, rec in lock.analyses.items() if any(out in rec.outputs for out in failing)]
    capture = capture_project(config, numerics=False, recorded_folders=lock.data_folders)
    now_pkgs, then_pkgs = capture.environment.packages, lock.packages
    changes = [PackageChange(n, then_pkgs[n].version if n in then_pkgs else None,
                             now_pkgs[n].version if n in now_pkgs else None)
               for n in sorted(set(now_pkgs) | set(then_pkgs))
               if n not in now_pkgs or n not in then_pkgs or now_pkgs[n].version != then_pkgs[n].version]
    fixed = [c for c in changes if c.recorded is None]  # added: a folder on the path cannot take it away
    varied = [c for c in changes if c.recorded is not None]
    ranking = [line for name in names for line in candidate_causes(
        name, lock, Now(capture.environment, capture.data.records, capture.code.records, None,
                        config.seed_to_use(lock.project_seed), capture.data.folders))]

    def rank(c: PackageChange) -> int:
        return next((i for i, line in enumerate(ranking) if line.startswith(f"package {c.name} ")), len(ranking))

    varied.sort(key=rank)
    findings: list[Finding] = []
    own = compare_file_sets("data", as_entries(lock.data, lock.data_folders),
                            as_entries(capture.data.records, capture.data.folders))
    own += compare_file_sets("code", lock.code, capture.code.records)
    for f in own:
        findings.append(Finding(f.area, f.subject, "pinpoint.not_varied",
                                f"{f.message}: your own change, not varied by the search"))
    if config.seed_to_use(lock.project_seed) != lock.project_seed:
        findings.append(Finding("seed", "project", "pinpoint.not_varied", "the project seed differs from the "
                                "recorded one: your own change, not varied by the search"))
    for c in fixed:
        findings.append(Finding("package", c.name, "pinpoint.not_varied",
                                f"{c.describe()} since the record: kept in every candidate (an added package cannot "
                                "be taken away by composition; `holotype recreate` builds the recorded environment)"))
    if not varied:
        findings.append(Finding("analysis", ", ".join(names), "pinpoint.unexplained",
                                "no package version differs from the record, so none can be the cause; the "
                                "differences above are the candidates (`holotype replay --twice` tells "
                                "nondeterminism)"))
        return Judgement("pinpoint", apply_policy(findings, config.policy), warnings=config.warnings)
    remove_stale_sessions()
    plan = make_plan(config, capture.python, config.select(names), config.seed_to_use(lock.project_seed),
                     lock.source_date_epoch)
    overlays = Overlays(capture.python, installer or InstallerOptions())
    runner = make_runner(store, jobs=1, threads=config.threads, cluster=None, digest_file=LOCK_NAME)
    evidence: dict[frozenset[PackageChange], str] = {}
    runs = [0]

    def run_candidate(applied: list[PackageChange]) -> list[RunResult]:
        reverted = {c.name: str(c.recorded) for c in varied if c not in applied}
        path = overlays.python_path(reverted)
        seen = overlays.versions_seen(sorted(reverted), path) if reverted else {}
        wrong = [f"{n} {seen.get(n)} (wanted {v})" for n, v in reverted.items() if seen.get(n) != v]
        if wrong:
            raise HolotypeError(f"a candidate environment did not resolve to the recorded versions: {', '.join(wrong)}"
                                "; composition cannot express it here (try `holotype recreate`)")
        steps = tuple(dataclasses.replace(s, env={**s.env, "PYTHONPATH": _with_overlay(s.env, path)})
                      for s in plan.steps)
        runs[0] += 1
        say(f"candidate run {runs[0]} (at most {max_runs}): {len(applied)} of {len(varied)} differences applied")
        return runner.run(Plan(steps, plan.python, plan.project_seed), None)

    def moves(applied: list[PackageChange]) -> bool:
        results = run_candidate(applied)
        judged: list[Finding] = []
        for result in results:
            if not result.ok:
                judged.append(Finding("analysis", result.name, "analysis.failed", result.failure_text()))
                continue
            judged += compare_with_baselines(lock.analyses[result.name], result, store.baselines, config.rulebook)
        bad = [f for f in apply_policy(judged, config.policy) if f.severity == "fail"]
        evidence[frozenset(applied)] = "; ".join(f"{f.subject}: {f.message}" for f in bad[:3]) or \
            "all outputs reproduce"
        return bool(bad)

    saved = _snapshot(root, [out for name in names for out in lock.analyses[name].outputs])
    try:
        with store.one_writer():
            store.prepare()
            result = smallest_cause(varied, moves, max_runs)
            nondeterministic = ""
            if not result.proven and not result.exhausted:
                again = run_candidate(list(varied))  # the failing environment itself, twice
                first = run_candidate(list(varied))
                for a, b in zip(again, first):
                    if a.ok and b.ok:
                        differing = compare_two_runs(a, b, config.rulebook)
                        if differing:
                            nondeterministic = ", ".join(sorted(differing))
    finally:
        _restore(root, saved)
        kept = overlays.close(keep)
        runner.close()
    findings += _report(result, varied, names, failing, evidence, nondeterministic)
    notes = [f"{runs[0]} candidate run(s) of {', '.join(names)}; {len(varied)} package difference(s) searched, "
             f"{len(overlays.installed)} recorded version(s) installed once each",
             "a named cause is the change that moved the number, not a verdict on which number is right"]
    if kept is not None:
        notes.append(f"candidate folders kept in {kept}")
    return Judgement("pinpoint", apply_policy(findings, config.policy), notes=tuple(notes), warnings=config.warnings)


def _with_overlay(env: dict[str, str], path: str) -> str:
    """Holotype's hook folder stays first; the put-back packages come right after it, before anything else."""
    parts = env.get("PYTHONPATH", "").split(os.pathsep)
    return os.pathsep.join([parts[0], *([path] if path else []), *parts[1:]])


def _report(result: SearchResult[PackageChange], varied: list[PackageChange], names: list[str], failing: list[str],
            evidence: dict[frozenset[PackageChange], str], nondeterministic: str) -> list[Finding]:
    subject = ", ".join(failing)
    if nondeterministic:
        return [Finding("analysis", ", ".join(names), "pinpoint.nondeterministic",
                        f"the same candidate environment gave different outputs in two runs ({nondeterministic}): "
                        "the move is nondeterminism, not a package change; run `holotype replay --twice`")]
    culprits: list[PackageChange] = list(result.culprits)
    shown = " and ".join(c.describe() for c in culprits)
    held = ", ".join(f"{c.name} at {c.recorded}" for c in culprits)
    alone = evidence.get(frozenset(culprits), "")
    rest = evidence.get(frozenset(c for c in varied if c not in culprits), "")
    if result.exhausted:
        return [Finding("package", shown or subject, "pinpoint.unfinished",
                        f"the run budget ended after {result.runs} candidate runs; smallest set seen to move "
                        f"{subject}: {shown or 'none'} (raise --max-runs to finish)")]
    if not result.proven or not culprits:
        return [Finding("analysis", ", ".join(names), "pinpoint.unexplained",
                        f"no set of the {len(varied)} package differences explains the move of {subject} "
                        "(with every one put back it still moves, or it moves only with all of them): look at the "
                        "differences not varied, or build the recorded environment with `holotype recreate`")]
    together = " (they move it only together: each alone does not)" if len(culprits) > 1 else ""
    return [Finding("package", " + ".join(c.name for c in culprits), "pinpoint.cause",
                    f"with only {shown} applied to the recorded environment, {subject} moves ({alone}); with every "
                    f"other difference applied and {held}, {rest}{together}",
                    [c.recorded for c in culprits], [c.now for c in culprits])]
