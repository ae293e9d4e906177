"""`holotype record`: capture everything, run the analyses, store baselines, write holotype.lock."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import replace
from pathlib import Path

from holotype import __version__
from holotype.capture.fingerprints import HashProgress
from holotype.capture.numerics import libraries_from_info
from holotype.capture.project import capture_project
from holotype.capture.usage import declared_requirements, mark_used, used_closure
from holotype.clock import current_user, epoch_now, timestamp
from holotype.compare.judgement import config_judgement
from holotype.config import Config, load_config
from holotype.config_edit import add_seed
from holotype.errors import ConfigError, HolotypeError, LockfileError
from holotype.findings import Finding, Judgement
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock, write_lock
from holotype.manifests import LISTING_LEVEL
from holotype.records import (
    AnalysisRecord,
    Change,
    HistoryEntry,
    LockContents,
    OutputRecord,
    data_file_count,
    inputs_digest,
    stored_objects,
)
from holotype.run.events import RunEvents
from holotype.run.plan import make_plan
from holotype.run.runner import Runner, make_runner
from holotype.seeds import derive_seed, draw_seed
from holotype.store import ProjectStore


def ensure_seed(config: Config) -> tuple[Config, bool]:
    """The config with a project seed (drawn now if absent), and whether it still has to be written back."""
    if config.seed is not None:
        return config, False
    if config.source is None:
        raise HolotypeError("no holotype.toml here; run 'holotype start' first", config.root)
    return replace(config, seed=draw_seed()), True


def _changes(old: LockContents | None, analyses: dict[str, AnalysisRecord]) -> tuple[Change, ...]:
    """Outputs whose baseline this record replaces (or adds)."""
    before = {out: o.sha256 for rec in (old.analyses.values() if old else ()) for out, o in rec.outputs.items()}
    return tuple(Change(out, before.get(out, ""), o.sha256) for rec in analyses.values()
                 for out, o in sorted(rec.outputs.items()) if before.get(out) != o.sha256)


def _previous_lock(root: Path) -> LockContents | None:
    try:
        return read_lock(root / LOCK_NAME)
    except LockfileError:
        return None


def record_project(root: Path, *, run: bool = True, python: str | None = None,
                   hash_progress: HashProgress | None = None, run_progress: RunEvents | None = None,
                   runner: Runner | None = None, jobs: int | None = None, cluster: str | None = None) -> Judgement:
    """Record the project; on any failure nothing new is written and the report says why."""
    root = Path(root)
    config = load_config(root)
    store = ProjectStore(root)
    with store.one_writer():
        store.prepare()
        config, new_seed = ensure_seed(config)
        assert config.seed is not None
        capture = capture_project(config, python_override=python, progress=hash_progress, listings=True)
        findings: list[Finding] = []
        for rel, (kind, message) in capture.data.problems.items():
            findings.append(Finding("data", rel, f"data.{kind}", message))
        if capture.unmatched_data:
            raise ConfigError(f"data pattern '{capture.unmatched_data[0]}' matches no file; fix 'data' or add the "
                              "files", config.source)
        old = _previous_lock(root)
        # the date tools stamp into outputs: new with a run, kept with the baselines by --no-run
        epoch = epoch_now() if run or old is None else old.source_date_epoch
        analyses: dict[str, AnalysisRecord] = {}
        pending: list[bytes] = []
        if run:
            from holotype.compare.runs import failure_finding, process_findings  # NumPy: not for --no-run

            plan = make_plan(config, capture.python, config.select(None), config.seed, epoch)
            runner = runner or make_runner(store, jobs=jobs, threads=config.threads, cluster=cluster or config.cluster,
                                           digest_file=config.source.name if config.source else LOCK_NAME)
            try:
                results = runner.run(plan, run_progress)
            finally:
                runner.close()
            for result in results:
                findings += process_findings(result)
                if not result.ok:
                    findings.append(failure_finding(result, root))
                    continue
                outputs = {}
                for out, produced in result.outputs.items():
                    pending.append(produced.data)
                    outputs[out] = OutputRecord(out, produced.sha256, produced.size,
                                                config.rulebook.for_output(out).summary())
                analysis = config.analysis(result.name)
                analyses[result.name] = AnalysisRecord(
                    result.name, result.command, result.seed, outputs, analysis.inputs, timeout=analysis.timeout,
                    modules=tuple(m for m in result.modules or () if m not in capture.environment.stdlib
                                  and m != "sitecustomize"),
                    libraries=tuple(sorted({lib.key for lib in libraries_from_info(result.libraries or ())})),
                    observed=result.modules is not None,
                    made_from=inputs_digest(capture.data.records, analysis.inputs, capture.data.folders))
                findings.append(Finding("analysis", result.name, "lockfile.note",
                                        f"ran in {result.seconds:.1f}s with seed {result.seed}; "
                                        f"{len(outputs)} output(s) captured"))
        elif old is not None:
            for name, rec in old.analyses.items():
                if any(a.name == name for a in config.analyses):
                    a = config.analysis(name)
                    analyses[name] = AnalysisRecord(name, a.command, derive_seed(config.seed, name), rec.outputs,
                                                    a.inputs, rec.modules, rec.libraries, rec.observed, a.timeout,
                                                    rec.made_from)
                    if rec.made_from and rec.made_from != inputs_digest(capture.data.records, a.inputs,
                                                                               capture.data.folders):
                        findings.append(Finding("analysis", name, "analysis.baselines_older",
                                                "its baselines were made from other data than the data recorded "
                                                "now (record --no-run keeps them); replay and adopt, or record "
                                                "with a run", rec.made_from, None))
        runtime = {m for rec in analyses.values() for m in rec.modules}
        if runtime:  # what the analyses imported at run time is used too (a lazily imported dependency included)
            needed = used_closure(capture.environment, set(capture.imported) | runtime, declared_requirements(root))
            environment = mark_used(capture.environment, needed)
            capture = replace(capture, environment=environment)
        for name, pkg in capture.environment.packages.items():
            if pkg.edited:
                shown = ", ".join(pkg.edited[:5]) + (f" and {len(pkg.edited) - 5} more" if len(pkg.edited) > 5 else "")
                findings.append(Finding("package", name, "package.edited",
                                        f"{len(pkg.edited)} installed file(s) already differ from what the installer "
                                        f"wrote: {shown}; recorded as found (reinstall it for a clean record)"))
        report_findings = apply_policy(findings, config.policy)
        if any(f.severity == "fail" for f in report_findings):
            return Judgement("record", report_findings, warnings=config.warnings,
                             notes=("nothing written: the lock and baselines are unchanged",))
        # each object is compressed and written with its own fsync: a few threads overlap those waits
        with ThreadPoolExecutor(max_workers=4, thread_name_prefix="holotype-store") as pool:
            list(pool.map(store.baselines.put, pending))
            list(pool.map(lambda raw: store.baselines.put(raw, LISTING_LEVEL), capture.data.listings.values()))
        seed_note = None
        if new_seed and config.source is not None:  # written only now that the record succeeded
            add_seed(config.source, config.seed)
            seed_note = f"drew project seed {config.seed} and wrote it to {config.source.name}"
        lock = LockContents(
            interpreter=capture.environment.interpreter,
            platform=capture.environment.platform,
            packages=capture.environment.packages,
            numerics=capture.numerics,
            judgement=config_judgement(config),
            requested_from=capture.requested_from,
            recorded=timestamp(),
            holotype=__version__,
            project_seed=config.seed,
            source_date_epoch=epoch,
            data=capture.data.records,
            data_folders=capture.data.folders,
            code=capture.code.records,
            analyses=analyses,
            history=list(old.history) if old is not None else [],
        )
        lock.history.append(HistoryEntry(when=lock.recorded, who=current_user(),
                                         reason="holotype record" + ("" if run else " --no-run"),
                                         analyses=tuple(sorted(analyses)), changes=_changes(old, analyses)))
        write_lock(root / LOCK_NAME, lock)
        stale = len(store.baselines.unreferenced(stored_objects(lock)))
    notes = [n for n in (seed_note,) if n]
    used = sum(p.used for p in lock.packages.values())
    notes.append(f"wrote {LOCK_NAME}: Python {lock.interpreter.version}, {len(lock.packages)} packages "
                 f"({used} used), {data_file_count(lock):,} data files, {len(lock.code)} code files, "
                 f"{len(lock.analyses)} analyses; the record is in its history")
    if stale:
        notes.append(f"{stale} baseline object(s) are no longer referenced; 'holotype tidy' lists them")
    return Judgement("record", report_findings, notes=tuple(notes), warnings=config.warnings)
