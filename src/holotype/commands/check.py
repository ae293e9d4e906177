"""`holotype check`: the project as it is now against holotype.lock, running nothing."""

from __future__ import annotations

from pathlib import Path

from holotype.baselines import BaselineError, BaselineStore
from holotype.capture.fingerprints import HashProgress
from holotype.capture.project import capture_project
from holotype.compare.environment import compare_interpreter, compare_packages, compare_platform
from holotype.compare.files import compare_file_sets
from holotype.config import Config, load_config
from holotype.findings import Finding, Report
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.records import Lock
from holotype.seeds import derive_seed


def compare_seeds_and_analyses(config: Config, lock: Lock) -> list[Finding]:
    """Config seeds and analyses against what the lock recorded."""
    out: list[Finding] = []
    if config.seed is not None and lock.project_seed is not None and config.seed != lock.project_seed:
        out.append(Finding("seed", "project", "seed.changed",
                           f"project seed {lock.project_seed} recorded, {config.seed} in the config",
                           lock.project_seed, config.seed))
    if config.seed is None and lock.project_seed is not None:
        out.append(Finding("seed", "project", "seed.changed",
                           f"project seed {lock.project_seed} recorded, none in the config", lock.project_seed, None))
    declared = {a.name: a for a in config.analyses}
    for name, rec in sorted(lock.analyses.items()):
        if name not in declared:
            out.append(Finding("analysis", name, "analysis.missing", "recorded, no longer declared in the config",
                               rec.run, None))
            continue
        a = declared[name]
        if a.run != rec.run:
            out.append(Finding("analysis", name, "analysis.changed", f"command changed: '{rec.run}' → '{a.run}'",
                               rec.run, a.run))
        if set(a.outputs) != set(rec.outputs):
            out.append(Finding("analysis", name, "analysis.changed", "declared outputs differ from the recorded ones",
                               sorted(rec.outputs), sorted(a.outputs)))
        if lock.project_seed is not None and rec.seed != derive_seed(lock.project_seed, name):
            out.append(Finding("seed", name, "seed.changed", "recorded seed does not follow from the project seed",
                               derive_seed(lock.project_seed, name), rec.seed))
    for name in declared:
        if name not in lock.analyses:
            out.append(Finding("analysis", name, "analysis.changed", "declared but never recorded; run holotype record",
                               None, declared[name].run))
    return out


def check_baselines(root: Path, lock: Lock, *, verify: bool) -> list[Finding]:
    """Every recorded output has its baseline object; with `verify`, its bytes match the digest too."""
    store = BaselineStore(root)
    findings: list[Finding] = []
    for rec in lock.analyses.values():
        for out, o in sorted(rec.outputs.items()):
            if verify:
                try:
                    store.get(o.sha256)
                except BaselineError as exc:
                    findings.append(Finding("output", out, "output.baseline", str(exc), o.sha256, None))
            elif not store.path_for(o.sha256).is_file():
                findings.append(Finding("output", out, "output.baseline",
                                        f"baseline {o.sha256[:12]}… is missing from {store.folder.relative_to(root)}"
                                        " (was .holotype/ committed?)", o.sha256, None))
    return findings


def check_project(root: Path, *, strict: bool = False, full: bool = False, python: str | None = None,
                  progress: HashProgress | None = None) -> Report:
    """Compare interpreter, platform, packages, data, code, seeds and analyses with the lock."""
    config = load_config(root, required=False)
    lock = read_lock(Path(root) / LOCK_NAME)
    now = capture_project(config, python_override=python, full=full, progress=progress)
    findings: list[Finding] = []
    findings += compare_interpreter(lock.interpreter, now.environment.interpreter)
    findings += compare_platform(lock.platform, now.environment.platform)
    findings += compare_packages(lock.packages, now.environment.packages)
    findings += compare_file_sets("data", lock.data, now.data.records, now.data.problems)
    findings += compare_file_sets("code", lock.code, now.code.records, now.code.problems)
    findings += compare_seeds_and_analyses(config, lock)
    findings += check_baselines(Path(root), lock, verify=full)
    for rel, problem in now.code_problems:
        findings.append(Finding("code", rel, "code.unparsable", problem))
    notes = (f"{len(lock.packages)} packages ({sum(p.used for p in lock.packages.values())} used), "
             f"{len(lock.data)} data files, {len(lock.code)} code files checked against {LOCK_NAME} "
             f"recorded {lock.recorded}",)
    return Report("check", apply_policy(findings, config.policy, strict=strict), notes=notes,
                  warnings=config.warnings)
