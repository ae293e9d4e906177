"""`holotype record`: capture everything, run the analyses, store baselines, write holotype.lock."""

from __future__ import annotations

import hashlib
import os
import secrets
from dataclasses import dataclass, replace
from datetime import UTC, datetime
from pathlib import Path

from holotype import __version__
from holotype.atomic import remove_stale_temps, write_atomic
from holotype.baselines import STORE_FOLDER, BaselineStore
from holotype.capture.fingerprints import HashProgress
from holotype.capture.project import capture_project
from holotype.capture.runs import RunProgress, run_each
from holotype.commands.rerun import failure_finding
from holotype.config import Config, load_config, run_order
from holotype.config_edit import add_seed
from holotype.errors import ConfigError, HolotypeError, LockfileError
from holotype.findings import Finding, Report
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock, write_lock
from holotype.project_lock import project_lock
from holotype.records import AnalysisRecord, Lock, OutputRecord
from holotype.seeds import derive_seed

STORE_GITIGNORE = ("# holotype: the baselines are committed; logs, the busy marker and the last rerun are not\n"
                   "busy\nlogs/\nlast-rerun.json\n")


def timestamp() -> str:
    """UTC time of the record (SOURCE_DATE_EPOCH wins, for byte-reproducible locks)."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    moment = datetime.fromtimestamp(int(epoch), UTC) if epoch and epoch.isdigit() \
        else datetime.now(UTC)
    return moment.strftime("%Y-%m-%dT%H:%M:%SZ")


def ensure_store(root: Path) -> None:
    """Create .holotype/ with its .gitignore and clear temp files a killed run left behind."""
    folder = Path(root) / STORE_FOLDER
    folder.mkdir(exist_ok=True)
    ignore = folder / ".gitignore"
    if not ignore.exists():
        write_atomic(ignore, STORE_GITIGNORE)
    remove_stale_temps(Path(root))
    BaselineStore(root).clean_temps()


def ensure_seed(config: Config) -> tuple[Config, bool]:
    """The config with a project seed (drawn now if absent), and whether it still has to be written back."""
    if config.seed is not None:
        return config, False
    if config.source is None:
        raise HolotypeError("no holotype.toml here; run 'holotype start' first", config.root)
    return replace(config, seed=1 + secrets.randbelow(2**31 - 1)), True


@dataclass
class RecordOutcome:
    report: Report
    written: bool


def previous_lock(root: Path) -> Lock | None:
    try:
        return read_lock(Path(root) / LOCK_NAME)
    except LockfileError:
        return None


def record_project(root: Path, *, run: bool = True, python: str | None = None,
                   hash_progress: HashProgress | None = None, run_progress: RunProgress | None = None) -> RecordOutcome:
    """Record the project; on any failure nothing new is written and the report says why."""
    root = Path(root)
    config = load_config(root)
    with project_lock(root):
        ensure_store(root)
        config, new_seed = ensure_seed(config)
        assert config.seed is not None
        capture = capture_project(config, python_override=python, progress=hash_progress)
        findings: list[Finding] = []
        for rel, (kind, message) in capture.data.problems.items():
            findings.append(Finding("data", rel, f"data.{kind}", message))
        if capture.unmatched_data:
            raise ConfigError(f"data pattern '{capture.unmatched_data[0]}' matches no file; fix 'data' or add the "
                              "files", config.source)
        old = previous_lock(root)
        analyses: dict[str, AnalysisRecord] = {}
        store = BaselineStore(root)
        if run:
            pending: list[tuple[str, bytes]] = []
            ordered = run_order(config.analyses, config.source)
            for result in run_each(config, capture.python, ordered, config.seed, run_progress):
                analysis = result.analysis
                if not result.ok:
                    findings.append(failure_finding(result, root))
                    continue
                outputs = {}
                for out, data in result.outputs.items():
                    digest = hashlib.sha256(data).hexdigest()
                    pending.append((out, data))
                    outputs[out] = OutputRecord(out, digest, len(data),
                                                config.rulebook.for_output(out).summary())
                analyses[analysis.name] = AnalysisRecord(analysis.name, analysis.run, result.seed, outputs,
                                                         analysis.inputs)
                findings.append(Finding("analysis", analysis.name, "lockfile.note",
                                        f"ran in {result.seconds:.1f}s with seed {result.seed}; "
                                        f"{len(outputs)} output(s) stored"))
        elif old is not None:
            analyses = {name: rec for name, rec in old.analyses.items()
                        if any(a.name == name for a in config.analyses)}
            for name, rec in analyses.items():
                analyses[name] = AnalysisRecord(name, config.analysis(name).run, derive_seed(config.seed, name),
                                                rec.outputs, config.analysis(name).inputs)
        report_findings = apply_policy(findings, config.policy)
        if any(f.severity == "fail" for f in report_findings):
            return RecordOutcome(Report("record", report_findings,
                                        notes=("nothing written: the lock and baselines are unchanged",),
                                        warnings=config.warnings), False)
        if run:
            for _out, data in pending:
                store.put(data)
        seed_note = None
        if new_seed and config.source is not None:  # written only now that the record succeeded
            add_seed(config.source, config.seed)
            seed_note = f"drew project seed {config.seed} and wrote it to {config.source.name}"
        lock = Lock(
            interpreter=capture.environment.interpreter,
            platform=capture.environment.platform,
            packages=capture.environment.packages,
            recorded=timestamp(),
            holotype=__version__,
            project_seed=config.seed,
            data=capture.data.records,
            code=capture.code.records,
            analyses=analyses,
            history=list(old.history) if old is not None else [],
        )
        write_lock(root / LOCK_NAME, lock)
    notes = [n for n in (seed_note,) if n]
    used = sum(p.used for p in lock.packages.values())
    notes.append(f"wrote {LOCK_NAME}: Python {lock.interpreter.version}, {len(lock.packages)} packages "
                 f"({used} used), {len(lock.data)} data files, {len(lock.code)} code files, "
                 f"{len(lock.analyses)} analyses")
    return RecordOutcome(Report("record", report_findings, notes=tuple(notes), warnings=config.warnings), True)
