"""`holotype replay`: run the analyses again with their seeds and compare every output with its baseline."""

from __future__ import annotations

import shlex
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

from holotype.capture.environment import resolve_python
from holotype.capture.project import ProjectCapture, capture_project
from holotype.clock import timestamp
from holotype.compare.analyses import compare_analyses, compare_project_seed
from holotype.compare.causes import Now, candidate_causes
from holotype.compare.drift import environment_drift
from holotype.compare.runs import (
    compare_two_runs,
    compare_with_baselines,
    failure_finding,
    process_findings,
    ran_finding,
)
from holotype.config import Config, load_config
from holotype.errors import HolotypeError, WriteError
from holotype.findings import Finding, Judgement
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.records import LockContents, RunResult
from holotype.run.events import RunEvents
from holotype.run.plan import Plan, make_plan
from holotype.run.runner import Runner, make_runner
from holotype.store import ProjectStore


def plan_findings(plan: Plan, root: Path, how: str) -> list[Finding]:
    """What would run, with which environment changes: for reading before running someone's code."""
    findings = []
    for step in plan.steps:
        argv = shlex.join(step.argv) if step.split_error is None else f"({step.split_error})"
        path_head = step.env.get("PATH", "").split(":")[0]
        variables = " ".join(f"{k}={v}" for k, v in step.shown_variables().items())
        findings.append(Finding("analysis", step.name, "analysis.plan",
                                f"would run: {argv} in {root} (timeout {step.timeout or 'none'}; interpreter "
                                f"{plan.python}, from {how}); "
                                f"PATH starts with {path_head}; {variables}", None, argv))
    return findings


def replay_project(root: Path, names: list[str] | None = None, *, twice: bool = False, python: str | None = None,
                   dry_run: bool = False, progress: RunEvents | None = None, runner: Runner | None = None,
                   jobs: int | None = None, cluster: str | None = None,
                   announce: Callable[[str], None] | None = None) -> Judgement:
    """Run analyses again and judge every output against its baseline.

    Changed commands are announced (`announce`) before anything runs. The run holds the project's
    writer lock, so `adopt` or `record` cannot take outputs that are still being written."""
    root = Path(root)
    config = load_config(root)
    lock = read_lock(root / LOCK_NAME)
    analyses = config.select(names)
    interpreter, how = resolve_python(config.python, root, python)
    project_seed = config.seed_to_use(lock.project_seed)
    plan = make_plan(config, interpreter, analyses, project_seed, lock.source_date_epoch)
    selected = [a.name for a in analyses]
    # a changed command or seed is shown before anything runs, in a dry run too
    findings = compare_project_seed(config, lock, ran_with=project_seed)
    findings += [f for f in compare_analyses(config, lock, selected) if f.kind != "analysis.missing"]
    warnings = config.warnings + lock.notices
    if announce is not None:
        for f in findings:
            if f.kind == "analysis.changed" and f.subject in selected and "command changed" in f.message:
                announce(f"analysis '{f.subject}': {f.message}; replay runs the command in the config")
    if dry_run:
        return Judgement("replay", apply_policy(findings + plan_findings(plan, root, how), config.policy),
                      notes=("dry run: nothing was run",), warnings=warnings, verdict=False)
    store = ProjectStore(root)
    with store.one_writer():
        return _run_and_judge(root, config, lock, plan, store, selected, findings, warnings, twice=twice,
                              progress=progress, runner=runner, jobs=jobs, cluster=cluster, python=python)


def _not_exact(f: Finding) -> bool:
    """A failing output, or one within tolerance but not byte-identical: worth a list of candidate causes."""
    return f.kind in ("output.mismatch", "output.shape", "output.unreadable") or (
        f.kind == "output.match" and f.message != "identical bytes")


def _with_candidates(findings: list[Finding], moved: list[tuple[str, Finding]], capture: ProjectCapture,
                     lock: LockContents, *, project_seed: int) -> list[Finding]:
    """Attach to each moved output the recorded differences that can move its analysis."""
    now = Now(capture.environment, capture.data.records, capture.code.records, capture.numerics, project_seed,
              capture.data.folders)
    causes = {name: tuple(candidate_causes(name, lock, now)) for name in {n for n, _ in moved}}
    by_finding = {id(f): causes[name] for name, f in moved}
    return [replace(f, candidates=by_finding[id(f)]) if id(f) in by_finding else f for f in findings]


def _run_and_judge(root: Path, config: Config, lock: LockContents, plan: Plan, store: ProjectStore,
                   selected: list[str], findings: list[Finding], warnings: tuple[str, ...], *, twice: bool,
                   progress: RunEvents | None, runner: Runner | None, jobs: int | None,
                   cluster: str | None, python: str | None = None) -> Judgement:
    store.prepare()
    runner = runner or make_runner(store, jobs=jobs, threads=config.threads, cluster=cluster or config.cluster,
                                   digest_file=LOCK_NAME)
    try:
        results = runner.run(plan, progress)
        seconds: dict[str, RunResult] = {}
        if twice:
            seconds = {r.name: r for r in runner.run(plan, progress, log_suffix=".second")}
    finally:
        runner.close()
    moved: list[tuple[str, Finding]] = []  # outputs that did not reproduce byte for byte, by analysis
    for result in results:
        findings += process_findings(result)
        record = lock.analyses.get(result.name)
        if not result.ok:
            findings.append(failure_finding(result, root))
            continue
        findings.append(ran_finding(result))
        second = seconds.get(result.name)
        unstable: dict[str, Finding] = {}
        if second is not None:
            unstable = compare_two_runs(result, second, config.rulebook) if second.ok else {
                "": Finding("analysis", result.name, "analysis.failed", f"second run: {second.failure_text()}")}
        if record is not None:
            if record.seed != result.seed:
                findings.append(Finding("seed", result.name, "seed.changed",
                                        f"seed {record.seed} recorded, {result.seed} used", record.seed, result.seed))
            # an output that differs between two runs is reported once, as nondeterministic, not also as a mismatch
            judged = [f for f in compare_with_baselines(record, result, store.baselines, config.rulebook)
                      if not (f.subject in unstable and f.kind == "output.mismatch")]
            findings += judged
            moved += [(result.name, f) for f in judged if _not_exact(f)]
        findings += unstable.values()
    failed = [r.name for r in results if not r.ok]
    capture: ProjectCapture | None = None
    if moved or failed:  # only then: a replay that reproduces byte for byte costs no capture
        try:
            capture = capture_project(config, python_override=python,  # the environment now
                                      recorded_folders=lock.data_folders)
        except HolotypeError as exc:  # the outputs' verdict stands; say what could not be compared
            warnings += (f"the environment was not compared with the record: {exc.message}",)
    if capture is not None:
        if moved:
            findings = _with_candidates(findings, moved, capture, lock, project_seed=plan.project_seed)
        failing = set(failed) | {name for name, f in moved if f.kind != "output.match"}
        findings += environment_drift(lock, capture.environment, capture.numerics, (r.name for r in results),
                                      failing)
    report = Judgement("replay", apply_policy(findings, config.policy), warnings=warnings)
    try:
        store.save_last_replay({"when": timestamp(), "analyses": selected,
                                "outputs": {out: p.sha256 for r in results if r.ok for out, p in r.outputs.items()},
                                **report.to_dict()})
    except WriteError as exc:  # the verdict stands; the caller says what could not be written
        return replace(report, unwritten=str(exc))
    return report
