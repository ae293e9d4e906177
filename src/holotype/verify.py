"""The check pipeline shared by `check` and `recreate`: capture the project now, compare it with the lock."""

from __future__ import annotations

from pathlib import Path

from holotype.capture.fingerprints import HashProgress
from holotype.capture.project import capture_project
from holotype.compare.analyses import check_baselines, compare_analyses, compare_project_seed
from holotype.compare.digests import compare_data, compare_file_sets, missing_listings
from holotype.compare.environment import compare_interpreter, compare_packages, compare_platform
from holotype.compare.judgement import compare_judgement, config_judgement
from holotype.compare.numerics import compare_numerics
from holotype.config import load_config
from holotype.findings import Finding, Judgement
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.records import LockContents, data_file_count
from holotype.store import BaselineStore


def verify_project(root: Path, *, command: str = "check", strict: bool = False, full: bool = False,
                   python: str | None = None, progress: HashProgress | None = None,
                   lock: LockContents | None = None) -> Judgement:
    """Compare interpreter, platform, packages, data, code, seeds and analyses with the lock, running nothing.

    `lock`: the lock already read by the caller (a lockfile is parsed once per command)."""
    root = Path(root)
    config = load_config(root, required=False)
    lock = lock if lock is not None else read_lock(root / LOCK_NAME)
    now = capture_project(config, python_override=python, full=full, progress=progress,
                          recorded_folders=lock.data_folders)
    baselines = BaselineStore(root)
    findings: list[Finding] = []
    findings += compare_interpreter(lock.interpreter, now.environment.interpreter)
    findings += compare_platform(lock.platform, now.environment.platform)
    findings += compare_packages(lock.packages, now.environment.packages)
    findings += compare_numerics(lock.numerics, now.numerics)
    findings += missing_listings(baselines, lock.data_folders)
    findings += compare_data(baselines, lock.data, lock.data_folders, now.data.records, now.data.folders,
                             now.data.folder_files, now.data.problems)
    findings += compare_file_sets("code", lock.code, now.code.records, now.code.problems)
    findings += compare_project_seed(config, lock)
    if config.source is not None:
        outputs = [out for rec in lock.analyses.values() for out in rec.outputs]
        findings += compare_judgement(lock.judgement, config_judgement(config), outputs,
                                      then="recorded", now=f"in {config.source.name}")
    findings += compare_analyses(config, lock)
    findings += check_baselines(baselines, lock, verify=full)
    for rel, problem in now.code_problems:
        findings.append(Finding("code", rel, "code.unparsable", problem))
    notes = (f"{len(lock.packages)} packages ({sum(p.used for p in lock.packages.values())} used), "
             f"{data_file_count(lock):,} data files, {len(lock.code)} code files checked against {LOCK_NAME} "
             f"recorded {lock.recorded}",)
    return Judgement(command, apply_policy(findings, config.policy, strict=strict), notes=notes,
                  warnings=config.warnings + lock.notices)
