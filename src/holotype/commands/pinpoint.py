"""`holotype pinpoint`: after a failed replay, which recorded difference moves which output.

The differences searched are the packages whose version changed since the record, those removed since
(put back for a candidate), those added since (taken away), and the numerics variables (thread counts,
MKL_CBWR, …) whose value differs from the recorded one. Each candidate is the analysis interpreter as it
is now with some differences held at the record: packages by folders ahead on the import path and by
holotype's start-up hook (run/overlays.py), variables by the analyses' environment. Where composition
cannot express a candidate (an added package sharing a namespace with one kept, an interpreter that does
not resolve to the wanted versions), the candidate is a full environment built as `recreate` builds one.
The failing analyses run in it with their recorded seeds; each failing output is judged against its
baseline by the same engine and rules as `replay`, and against what the failing replay wrote.

The search (search.py) runs once per failing output, likely causes first; runs are shared between the
searches, so outputs moved by the same change cost nothing more. The project's outputs are put back as
the failing replay left them, and the lock and baselines are only read; the candidate folders are
removed at the end (or kept with `keep`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from holotype.capture.numerics_probe import VARIABLES
from holotype.capture.project import capture_project
from holotype.compare.causes import Now, candidate_causes
from holotype.compare.digests import as_entries, compare_file_sets
from holotype.compare.outputs import compare_or_unreadable
from holotype.compare.runs import compare_two_runs, compare_with_baselines
from holotype.compare.source import Source
from holotype.config import Config, load_config
from holotype.environments import build_environment, find_interpreter
from holotype.errors import HolotypeError
from holotype.findings import Finding, Judgement
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.records import FileRecord, FolderRecord, LockContents, PackageRecord, RunResult
from holotype.run.overlays import Overlays, remove_stale_sessions
from holotype.run.plan import Plan, make_plan
from holotype.run.runner import make_runner
from holotype.search import OutOfRuns, SearchResult, smallest_cause
from holotype.standards.installer import InstallerOptions
from holotype.standards.requirements import requirement_line
from holotype.store import ProjectStore

FAILING = ("output.mismatch", "output.shape", "output.missing", "output.unreadable")
KEPT_BYTES = 64 << 20  # a candidate's output up to this size is kept to compare with the failing replay's


@dataclass(frozen=True)
class Difference:
    """One thing that differs between the record and now: a package's version, or a numerics variable."""

    kind: str  # "package" or "variable"
    name: str
    recorded: str | None  # None: added since the record (a package) or unset at the record (a variable)
    now: str | None  # None: removed since the record, or unset now
    modules: tuple[str, ...] = ()  # an added package's top-level modules (taken away to hold it at the record)

    def describe(self) -> str:
        if self.kind == "variable":
            return f"{self.name} {_shown(self.recorded)} → {_shown(self.now)}"
        if self.now is None:
            return f"{self.name} {self.recorded} removed"
        if self.recorded is None:
            return f"{self.name} {self.now} added"
        return f"{self.name} {self.recorded} → {self.now}"

    def held(self) -> str:
        if self.kind == "variable":
            return f"{self.name} {_shown(self.recorded)}"
        return f"{self.name} absent" if self.recorded is None else f"{self.name} at {self.recorded}"


def _shown(value: str | None) -> str:
    return "unset" if value is None else repr(value)


@dataclass
class Outcome:
    """What one candidate run did to the failing outputs."""

    moved: dict[str, str] = field(default_factory=dict)  # output -> how it moved (the first failing finding)
    outputs: dict[str, bytes | None] = field(default_factory=dict)  # output -> what the run wrote
    how: str = "composed"  # or "full environment"


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


def _differences(lock: LockContents, now_pkgs: dict[str, PackageRecord], now_vars: dict[str, str]) -> list[Difference]:
    then_pkgs = lock.packages
    found = [Difference("package", n, then_pkgs[n].version if n in then_pkgs else None,
                        now_pkgs[n].version if n in now_pkgs else None,
                        now_pkgs[n].top_level if n in now_pkgs and n not in then_pkgs else ())
             for n in sorted(set(now_pkgs) | set(then_pkgs))
             if n not in now_pkgs or n not in then_pkgs or now_pkgs[n].version != then_pkgs[n].version]
    if lock.numerics is not None:  # variables are known only where the record inspected the numeric stack
        then_vars = lock.numerics.variables
        found += [Difference("variable", v, then_vars.get(v), now_vars.get(v)) for v in VARIABLES
                  if then_vars.get(v) != now_vars.get(v)]
    return found


class Candidates:
    """Builds and runs candidate environments: every difference not applied is held at the record."""

    def __init__(self, root: Path, config: Config, lock: LockContents, plan: Plan, overlays: Overlays,
                 now_pkgs: dict[str, PackageRecord], varied: list[Difference], installer: InstallerOptions,
                 say: Callable[[str], None], max_runs: int,
                 progress: Callable[[int, int, str], None] | None = None) -> None:
        self.root, self.config, self.lock, self.plan, self.overlays = root, config, lock, plan, overlays
        self.now_pkgs, self.varied, self.installer = now_pkgs, varied, installer
        self.say, self.max_runs, self.progress = say, max_runs, progress
        self.store = ProjectStore(root)
        self.runner = make_runner(self.store, jobs=1, threads=config.threads, cluster=None, digest_file=LOCK_NAME)
        self.known: dict[frozenset[Difference], Outcome] = {}
        self.runs = 0
        self.full = 0  # candidates built as full environments

    def outcome(self, applied: list[Difference]) -> Outcome:
        key = frozenset(applied)
        if key not in self.known:
            if self.runs >= self.max_runs:
                raise OutOfRuns()
            self.known[key] = self._judge(self.run(applied))
        return self.known[key]

    def run(self, applied: list[Difference]) -> tuple[list[RunResult], str]:
        held = [d for d in self.varied if d not in applied]
        reverted = {d.name: str(d.recorded) for d in held if d.kind == "package" and d.recorded is not None}
        hidden = {d.name: d.modules for d in held if d.kind == "package" and d.recorded is None}
        variables = {d.name: d.recorded for d in held if d.kind == "variable"}
        plan, how = self._composed(reverted, hidden, variables)
        self.runs += 1
        what = f"{len(applied)} of {len(self.varied)} differences applied ({how})"
        if self.progress is not None:
            self.progress(self.runs, max(self.max_runs - self.runs, 0), what)
        else:
            self.say(f"candidate run {self.runs} (at most {self.max_runs}, {how}): {len(applied)} of "
                     f"{len(self.varied)} differences applied")
        return self.runner.run(plan, None), how

    def _composed(self, reverted: dict[str, str], hidden: dict[str, tuple[str, ...]],
                  variables: dict[str, str | None]) -> tuple[Plan, str]:
        kept_modules = {m for n, p in self.now_pkgs.items() if n not in hidden for m in p.top_level}
        shared = sorted({m for mods in hidden.values() for m in mods} & kept_modules)
        if not shared:
            steps = tuple(dataclasses.replace(s, env=_with_variables(self.overlays.compose(s.env, reverted, hidden),
                                                                     variables)) for s in self.plan.steps)
            wanted: dict[str, str | None] = {**reverted, **{n: None for n in hidden}}
            modules = sorted({m for mods in hidden.values() for m in mods})
            seen = self.overlays.versions_seen(sorted(wanted), steps[0].env, modules) if wanted else {}
            if all(seen.get(n) == v for n, v in wanted.items()) and not any(seen.get(f"import {m}") for m in modules):
                return Plan(steps, self.plan.python, self.plan.project_seed), "composed"
        return self._full(reverted, hidden, variables), "full environment"

    def _full(self, reverted: dict[str, str], hidden: dict[str, tuple[str, ...]],
              variables: dict[str, str | None]) -> Plan:
        """The candidate as a fresh virtual environment: every package at the candidate's version."""
        packages = {n: p for n, p in self.now_pkgs.items() if n not in hidden and n not in reverted}
        packages.update({n: self.lock.packages[n] for n in reverted})
        target = self.overlays.folder / f"environment-{self.full + 1}"
        self.say(f"building a full candidate environment in {target} (composition cannot express this one)")
        python, _ = build_environment(dataclasses.replace(self.lock, packages=packages), self.root, target,
                                      find_interpreter(self.lock), self.installer, {})
        self.full += 1
        seen = self.overlays.versions_seen(sorted(packages), {}, python=python)
        wrong = [f"{n} {seen.get(n)} (wanted {p.version})" for n, p in packages.items() if seen.get(n) != p.version]
        if wrong:
            raise HolotypeError(f"a full candidate environment did not resolve to the wanted versions: "
                                f"{', '.join(wrong[:5])}")
        plan = make_plan(self.config, python, self.config.select([s.name for s in self.plan.steps]),
                         self.plan.project_seed, self.lock.source_date_epoch)
        steps = tuple(dataclasses.replace(s, env=_with_variables(s.env, variables)) for s in plan.steps)
        return Plan(steps, plan.python, plan.project_seed)

    def _judge(self, ran: tuple[list[RunResult], str]) -> Outcome:
        results, how = ran
        outcome = Outcome(how=how)
        for result in results:
            record = self.lock.analyses[result.name]
            if not result.ok:
                for out in record.outputs:
                    outcome.moved[out] = f"the analysis failed: {result.failure_text()}"
                continue
            judged = apply_policy(compare_with_baselines(record, result, self.store.baselines, self.config.rulebook),
                                  self.config.policy)
            for f in judged:
                if f.severity == "fail" and f.kind in FAILING and f.subject not in outcome.moved:
                    outcome.moved[f.subject] = f.message
            for out in record.outputs:  # kept for the comparison with the failing replay (small enough ones)
                produced = result.outputs.get(out)
                outcome.outputs[out] = produced.data if produced is not None and produced.size <= KEPT_BYTES else None
        return outcome

    def twice_differ(self) -> str:
        """Runs the failing environment itself twice: the outputs that differ between the two runs."""
        first, _ = self.run(list(self.varied))
        second, _ = self.run(list(self.varied))
        differing: set[str] = set()
        for a, b in zip(first, second):
            if a.ok and b.ok:
                differing |= set(compare_two_runs(a, b, self.config.rulebook))
        return ", ".join(sorted(differing))

    def close(self) -> None:
        self.runner.close()


def _with_variables(env: dict[str, str], variables: dict[str, str | None]) -> dict[str, str]:
    out = dict(env)
    for name, value in variables.items():
        if value is None:
            out.pop(name, None)
        else:
            out[name] = value
    return out


def pinpoint_project(root: Path, *, max_runs: int = 32, keep: bool = False,
                     installer: InstallerOptions | None = None, say: Callable[[str], None] | None = None,
                     progress: Callable[[int, int, str], None] | None = None) -> Judgement:
    """Find, for each output the last replay failed on, the smallest set of differences that moves it.

    `say` hears one line per candidate run and per environment built; `progress(done, at_most_left, what)`,
    when given, hears the runs instead (a live display)."""
    root = Path(root)
    say = say or (lambda _text: None)
    config = load_config(root)
    lock = read_lock(root / LOCK_NAME)
    store = ProjectStore(root)
    remove_stale_sessions(root)  # a session killed mid-run: its candidate's outputs go, the saved ones come back
    last = store.last_replay()
    if not last:
        raise HolotypeError("no replay to explain yet: run 'holotype replay' first", root)
    failing = _failing_outputs(last)
    if not failing:
        return Judgement("pinpoint", (), notes=("the last replay reproduced every output: nothing to pinpoint",),
                         warnings=config.warnings)
    names = [name for name, rec in lock.analyses.items() if any(out in rec.outputs for out in failing)]
    capture = capture_project(config, numerics=False, recorded_folders=lock.data_folders)
    seed = config.seed_to_use(lock.project_seed)
    plan = make_plan(config, capture.python, config.select(names), seed, lock.source_date_epoch)
    now_vars = {v: plan.steps[0].env[v] for v in VARIABLES if v in plan.steps[0].env} if plan.steps else {}
    varied = _differences(lock, capture.environment.packages, now_vars)
    ranking = [line for name in names for line in candidate_causes(
        name, lock, Now(capture.environment, capture.data.records, capture.code.records, None, seed,
                        capture.data.folders))]

    def rank(d: Difference) -> int:
        heads = (f"{d.kind} {d.name} ", f"{d.kind} {d.name}:")
        return next((i for i, line in enumerate(ranking) if line.startswith(heads)), len(ranking))

    varied.sort(key=rank)
    findings = _not_varied(lock, capture.data.records, capture.data.folders, capture.code.records, seed)
    if not varied:
        findings.append(Finding("analysis", ", ".join(names), "pinpoint.unexplained",
                                "no package version or numerics variable differs from the record, so none can be "
                                "the cause; the differences above are the candidates (`holotype replay --twice` "
                                "tells nondeterminism)"))
        return Judgement("pinpoint", apply_policy(findings, config.policy), warnings=config.warnings)
    options = installer or InstallerOptions()
    saved = _snapshot(root, [out for name in names for out in lock.analyses[name].outputs])
    overlays = Overlays(capture.python, options, {n: requirement_line(p, root) for n, p in lock.packages.items()
                                                  if p.origin.kind in ("vcs", "archive")})
    candidates = Candidates(root, config, lock, plan, overlays, capture.environment.packages, varied, options, say,
                            max_runs, progress)
    results: dict[str, SearchResult[Difference]] = {}
    nondeterministic = ""
    try:
        overlays.save_outputs(root, saved)
        with store.one_writer():
            store.prepare()
            for out in failing:
                def moves(applied: list[Difference], out: str = out) -> bool:
                    return out in candidates.outcome(applied).moved

                results[out] = smallest_cause(varied, moves, max_runs)
            if any(not r.proven and not r.exhausted for r in results.values()):
                nondeterministic = candidates.twice_differ()
    finally:
        overlays.put_back()
        kept = overlays.close(keep)
        candidates.close()
    for out in failing:
        findings += _report(out, results[out], varied, names, candidates, saved, config, nondeterministic)
    composed = sum(1 for o in candidates.known.values() if o.how == "composed")
    findings.append(Finding("analysis", ", ".join(names), "pinpoint.searched",
                            f"{candidates.runs} candidate run(s); {len(varied)} difference(s) searched for "
                            f"{len(failing)} failing output(s); {len(overlays.installed)} recorded version(s) "
                            f"installed once each; {composed} candidate(s) composed on the current environment, "
                            f"{candidates.full} built as full environments"))
    notes = ["a named cause is the change that moved the number, not a verdict on which number is right"]
    if kept is not None:
        notes.append(f"candidate folders kept in {kept}")
    return Judgement("pinpoint", apply_policy(findings, config.policy), notes=tuple(notes), warnings=config.warnings)


def _not_varied(lock: LockContents, data: dict[str, FileRecord], folders: dict[str, FolderRecord],
                code: dict[str, FileRecord], seed: int) -> list[Finding]:
    """Data, code and seed differences: listed first as candidates, never varied (the user's own changes)."""
    findings: list[Finding] = []
    own = compare_file_sets("data", as_entries(lock.data, lock.data_folders), as_entries(data, folders))
    own += compare_file_sets("code", lock.code, code)
    for f in own:
        findings.append(Finding(f.area, f.subject, "pinpoint.not_varied",
                                f"{f.message}: your own change, not varied by the search"
                                + (" (holotype keeps digests of data, not the recorded bytes, so the old file "
                                   "cannot be put back)" if f.area == "data" else "")))
    if seed != lock.project_seed:
        findings.append(Finding("seed", "project", "pinpoint.not_varied", "the project seed differs from the "
                                "recorded one: your own change, not varied by the search"))
    return findings


def _as_in_failing_replay(out: str, outcome: Outcome | None, saved: dict[str, bytes | None], config: Config) -> str:
    """Whether a candidate wrote `out` as the failing replay did (same engine, the project's tolerances)."""
    if outcome is None:
        return ""
    mine, theirs = outcome.outputs.get(out), saved.get(out)
    if mine is None or theirs is None:
        return ""
    verdict = compare_or_unreadable(out, Source.from_bytes(theirs, out, f"{out} (failing replay)"),
                                    Source.from_bytes(mine, out, f"{out} (candidate)"), config.rulebook)
    bad = [f for f in apply_policy(verdict, config.policy) if f.severity == "fail"]
    return "exactly as in the failing replay" if not bad else f"but not as in the failing replay ({bad[0].message})"


def _report(out: str, result: SearchResult[Difference], varied: list[Difference], names: list[str],
            candidates: Candidates, saved: dict[str, bytes | None], config: Config,
            nondeterministic: str) -> list[Finding]:
    culprits = list(result.culprits)
    shown = " and ".join(c.describe() for c in culprits)
    alone = candidates.known.get(frozenset(culprits))
    rest = candidates.known.get(frozenset(c for c in varied if c not in culprits))
    if result.exhausted:
        return [Finding("package", shown or out, "pinpoint.unfinished",
                        f"{out}: the run budget ended after {candidates.runs} candidate runs; the smallest set seen "
                        f"to move it: {shown or 'none'} (raise --max-runs to finish)")]
    if not result.proven or not culprits:
        if nondeterministic:
            return [Finding("analysis", ", ".join(names), "pinpoint.nondeterministic",
                            f"{out}: the same candidate environment gave different outputs in two runs "
                            f"({nondeterministic}): the move is nondeterminism, not a package change; run "
                            "`holotype replay --twice`")]
        return [Finding("analysis", ", ".join(names), "pinpoint.unexplained",
                        f"no set of the {len(varied)} differences explains the move of {out} (with every one held "
                        "at the record it still moves, or it moves only with all of them): look at the differences "
                        "not varied, or build the recorded environment with `holotype recreate`")]
    how = alone.moved.get(out, "") if alone else ""
    exactly = _as_in_failing_replay(out, alone, saved, config)
    others = sorted(o for o in rest.moved) if rest else []
    reproduces = ("all outputs reproduce" if not others else
                  f"{out} reproduces (still moving: {', '.join(others)})")
    together = " (they move it only together: each alone does not)" if len(culprits) > 1 else ""
    used = {o.how for o in (alone, rest) if o is not None}
    kinds = {c.kind for c in culprits}
    return [Finding("package" if kinds == {"package"} else "environment", " + ".join(c.name for c in culprits),
                    "pinpoint.cause",
                    f"{out}: with only {shown} applied to the recorded environment, it moves {exactly} ({how}); "
                    f"with every other difference applied and {', '.join(c.held() for c in culprits)}, "
                    f"{reproduces}{together} [candidates: {', '.join(sorted(used))}]",
                    [c.recorded for c in culprits], [c.now for c in culprits])]
