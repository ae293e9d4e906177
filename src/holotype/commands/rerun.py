"""`holotype rerun`: run the analyses again with their seeds and compare every output with its baseline."""

from __future__ import annotations

import json
import shlex
from pathlib import Path

from holotype.atomic import write_atomic
from holotype.baselines import STORE_FOLDER, BaselineError, BaselineStore
from holotype.capture.environment import resolve_python
from holotype.capture.runs import RunProgress, RunResult, analysis_environment, command_for, run_analysis, run_each
from holotype.compare.outputs import compare_sources
from holotype.compare.source import Source, UnreadableOutput
from holotype.compare.tolerance import RuleBook, Tolerance
from holotype.config import Analysis, Config, load_config, run_order
from holotype.errors import ConfigError
from holotype.findings import Finding, Report
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.records import AnalysisRecord, Lock
from holotype.seeds import derive_seed

EXACT = RuleBook(default=Tolerance())
NONDETERMINISM_CAUSES = ("an unseeded random generator (use holotype.seeds.rng() or set seed_globals = true), "
                         "more than one BLAS/OpenMP thread (set threads = 1), iteration over a set or dict "
                         "of strings, or the time or date in the output")


def failure_finding(result: RunResult, root: Path) -> Finding:
    """An analysis that crashed, timed out or wrote no output: the error text and where its log is."""
    return Finding("analysis", result.analysis.name, "analysis.failed",
                   f"{result.failure_text()} (log: {result.log.relative_to(root)})")


def select_analyses(config: Config, names: list[str] | None) -> list[Analysis]:
    """The analyses to run, in run order; unknown names are a usage error."""
    ordered = run_order(config.analyses, config.source)
    if not names:
        return ordered
    known = {a.name for a in ordered}
    unknown = [n for n in names if n not in known]
    if unknown:
        raise ConfigError(f"no analysis named {', '.join(repr(n) for n in unknown)} "
                          f"(declared: {', '.join(sorted(known)) or 'none'})", config.source)
    return [a for a in ordered if a.name in names]


def effective_seed(config: Config, lock: Lock) -> tuple[int, list[Finding]]:
    """The project seed to run with (the config's, else the recorded one) and a finding if they differ."""
    recorded = lock.project_seed
    if config.seed is None and recorded is None:
        raise ConfigError("no project seed in the config or the lock; run holotype record", config.source)
    seed = config.seed if config.seed is not None else recorded
    assert seed is not None
    findings = []
    if recorded is not None and seed != recorded:
        findings.append(Finding("seed", "project", "seed.changed",
                                f"project seed {recorded} recorded, {seed} in the config; analyses ran with {seed}, "
                                "so their outputs show what the new seed changes", recorded, seed))
    return seed, findings


def _first_difference(finding: Finding) -> str:
    if finding.stats is not None and finding.stats.worst:
        return f"first differing value at {finding.stats.worst}: {finding.expected} then {finding.actual}"
    return finding.message


def compare_outputs(config: Config, record: AnalysisRecord, result: RunResult, store: BaselineStore) -> list[Finding]:
    """Each fresh output against its baseline, through the engine and the project's rules."""
    findings: list[Finding] = []
    for out, rec in sorted(record.outputs.items()):
        if out not in result.outputs:
            findings.append(Finding("output", out, "output.missing", "not written by this run", rec.sha256, None))
            continue
        try:
            baseline = store.get(rec.sha256)
        except BaselineError as exc:
            findings.append(Finding("output", out, "output.baseline", str(exc), rec.sha256, None))
            continue
        expected = Source.from_bytes(baseline, out, f"baseline of {out}")
        actual = Source.from_bytes(result.outputs[out], out, out)
        try:
            findings += compare_sources(out, expected, actual, config.rulebook)
        except UnreadableOutput as exc:
            findings.append(Finding("output", out, "output.unreadable", f"{exc.label}: {exc.message}"))
    for out in result.outputs:
        if out not in record.outputs:
            findings.append(Finding("output", out, "output.extra", "declared now, no baseline recorded; "
                                    "run holotype accept to take it", None, out))
    return findings


def compare_runs(first: RunResult, second: RunResult) -> list[Finding]:
    """Two fresh runs must agree exactly; any difference means the analysis is nondeterministic."""
    findings: list[Finding] = []
    for out, data in sorted(first.outputs.items()):
        if out not in second.outputs:
            continue
        same = compare_sources(out, Source.from_bytes(data, out, f"{out} (first run)"),
                               Source.from_bytes(second.outputs[out], out, f"{out} (second run)"), EXACT) \
            if data != second.outputs[out] else []
        bad = [f for f in same if f.kind != "output.match"]
        if bad:
            findings.append(Finding("analysis", first.analysis.name, "analysis.nondeterministic",
                                    f"nondeterministic: two runs with the same seed wrote different {out}; "
                                    f"{_first_difference(bad[0])}. Likely causes: {NONDETERMINISM_CAUSES}",
                                    bad[0].expected, bad[0].actual))
    return findings


def plan(config: Config, python: str, analyses: list[Analysis], project_seed: int) -> list[Finding]:
    """What would run, with which environment changes: for reading before running someone's code."""
    findings = []
    for a in analyses:
        env = analysis_environment(config, python, a, project_seed)
        shown = {k: env[k] for k in sorted(env) if k.startswith("HOLOTYPE_") or k in (
            "PYTHONHASHSEED", "VIRTUAL_ENV", "PYTHONPATH", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
            "MKL_NUM_THREADS", "BLIS_NUM_THREADS", "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")}
        path_head = env["PATH"].split(":")[0]
        try:
            argv = shlex.join(command_for(a.run, python))
        except ValueError as exc:
            argv = f"(cannot split: {exc})"
        variables = " ".join(f"{k}={v}" for k, v in shown.items())
        findings.append(Finding("analysis", a.name, "analysis.plan",
                                f"would run: {argv} in {config.root} (timeout {a.timeout or 'none'}); "
                                f"PATH starts with {path_head}; {variables}", None, argv))
    return findings


def rerun_project(root: Path, names: list[str] | None = None, *, twice: bool = False, python: str | None = None,
                  dry_run: bool = False, progress: RunProgress | None = None) -> Report:
    """Run analyses again and judge every output against its baseline."""
    root = Path(root)
    config = load_config(root)
    lock = read_lock(root / LOCK_NAME)
    analyses = select_analyses(config, names)
    interpreter, _how = resolve_python(config.python, root, python)
    project_seed, findings = effective_seed(config, lock)
    if dry_run:
        return Report("rerun", apply_policy(findings + plan(config, interpreter, analyses, project_seed),
                                            config.policy), notes=("dry run: nothing was run",),
                      warnings=config.warnings)
    store = BaselineStore(root)
    for result in run_each(config, interpreter, analyses, project_seed, progress):
        analysis = result.analysis
        record = lock.analyses.get(analysis.name)
        if not result.ok:
            findings.append(failure_finding(result, root))
            continue
        findings.append(Finding("analysis", analysis.name, "analysis.ran",
                                f"ran in {result.seconds:.1f}s with seed {result.seed}"))
        if record is None:
            findings.append(Finding("analysis", analysis.name, "analysis.changed",
                                    "no baseline recorded for this analysis; run holotype record or accept"))
        else:
            if record.seed != derive_seed(project_seed, analysis.name):
                findings.append(Finding("seed", analysis.name, "seed.changed",
                                        f"seed {record.seed} recorded, {result.seed} used", record.seed, result.seed))
            findings += compare_outputs(config, record, result, store)
        if twice:
            second = run_analysis(config, interpreter, analysis, project_seed, log_suffix=".second")
            if not second.ok:
                findings.append(Finding("analysis", analysis.name, "analysis.failed",
                                        f"second run: {second.failure_text()}"))
            else:
                findings += compare_runs(result, second)
    report = Report("rerun", apply_policy(findings, config.policy), warnings=config.warnings)
    save_last_rerun(root, report, [a.name for a in analyses])
    return report


LAST_RERUN = "last-rerun.json"


def save_last_rerun(root: Path, report: Report, names: list[str]) -> None:
    """Keep the latest rerun's findings for `holotype report` (in .holotype/, not committed)."""
    from holotype.commands.record import timestamp

    doc = {"when": timestamp(), "analyses": names, **report.to_dict()}
    write_atomic(Path(root) / STORE_FOLDER / LAST_RERUN, json.dumps(doc, indent=1, default=str))
