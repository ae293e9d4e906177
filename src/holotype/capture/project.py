"""Capture a whole project at once: target environment, which packages it uses, data and code digests."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from holotype.capture.data_folders import DataResult, fingerprint_data
from holotype.capture.digest_cache import DigestCache
from holotype.capture.environment import ProbeRun, environment_from_probe, resolve_python
from holotype.capture.fingerprints import FingerprintResult, HashProgress, fingerprint_files
from holotype.capture.imports import scan_imports
from holotype.capture.installed import digest_installed, with_installed
from holotype.capture.numerics import finish_inspection, start_inspection
from holotype.capture.usage import declared_requirements, mark_used, truthful_requested, used_closure
from holotype.capture.walk import GLOB_CHARS, ProjectFile, ProjectWalker, glob_regex
from holotype.config import Config
from holotype.errors import ConfigError
from holotype.records import Environment, FolderRecord, NumericStack


@dataclass
class ProjectCapture:
    environment: Environment
    python: str
    data: DataResult
    code: FingerprintResult
    code_problems: list[tuple[str, str]] = field(default_factory=list)
    unmatched_data: list[str] = field(default_factory=list)
    numerics: NumericStack | None = None
    imported: frozenset[str] = frozenset()  # top-level modules the project's code imports (static scan)
    requested_from: str = "installer"  # where each package's "requested" came from (capture/usage.py)


def tracked_files(config: Config) -> tuple[dict[str, ProjectFile], dict[str, ProjectFile], list[str]]:
    """Data files, code files, and data patterns that matched nothing.

    Outputs are never inputs: declared outputs are left out of both sets (an output written inside a data
    folder is not data), and the default code set also skips the folders outputs are written to (an executed
    notebook under results/ is not code). A data or code entry that names an output itself is a config error.
    """
    outputs = {out: a.name for a in config.analyses for out in a.outputs}
    for key, patterns in (("data", config.data), ("code", config.code or ())):
        for pattern in patterns:
            plain = pattern.rstrip("/")
            regex = glob_regex(plain) if GLOB_CHARS.intersection(plain) else None
            for out, name in outputs.items():
                if out == plain or (regex is not None and regex.match(out)):
                    raise ConfigError(f"'{key}' entry '{pattern}' takes in '{out}', an output of analysis '{name}'; "
                                      "an output cannot also be an input the record fingerprints (narrow the "
                                      "pattern, or move the output)", config.source)
    walker = ProjectWalker(config.root, config.exclude, config.allow_outside, config.source, frozenset(outputs))
    if config.code is None:
        walker.everything()  # one walk for data and the default code set
    data, unmatched = walker.collect(config.data)
    if config.code is not None:
        code, _ = walker.collect(config.code)
    else:
        folders = {o.rsplit("/", 1)[0] + "/" for o in outputs if "/" in o}
        code = {rel: f for rel, f in walker.code_files(data).items()
                if not any(rel.startswith(folder) for folder in folders)}
    if outputs:  # the walker already leaves them out; a plain pattern naming one does not
        data = {rel: f for rel, f in data.items() if rel not in outputs}
        code = {rel: f for rel, f in code.items() if rel not in outputs}
    return data, code, unmatched


def capture_project(config: Config, *, python_override: str | None = None, full: bool = False,
                    progress: HashProgress | None = None, numerics: bool = True,
                    recorded_folders: dict[str, FolderRecord] | None = None,
                    listings: bool = False) -> ProjectCapture:
    """Everything `record` writes and `check` compares, except analysis outputs.

    `recorded_folders` (the lock's data folders) lets an unchanged big folder be judged by stat alone;
    `listings` builds every data folder's listing object for the store (record)."""
    python, how = resolve_python(config.python, config.root, python_override)
    probe = ProbeRun(python, config.root, how)  # runs while the files are walked and hashed
    inspection = start_inspection(python, config.threads) if numerics else None
    stack = None
    try:
        data_files, code_files, unmatched = tracked_files(config)
        scan = scan_imports([(rel, Path(f.path)) for rel, f in code_files.items() if rel.endswith((".py", ".ipynb"))])
        cache = None if full else DigestCache()
        try:
            data = fingerprint_data(data_files, str(config.root), cache=cache, recorded=recorded_folders,
                                    progress=progress, listings=listings)
            code = fingerprint_files(code_files, cache=cache)
            env = environment_from_probe(probe.result(), config.root, python)
            outputs = {out for a in config.analyses for out in a.outputs}
            env = with_installed(env, digest_installed(env, Path(config.root), cache=cache, excludes=config.exclude,
                                                       skip=set(data_files) | outputs))
            if inspection is not None:
                stack = finish_inspection(inspection, python, env, config.threads, cache)
        finally:
            if cache is not None:
                cache.close()
    finally:
        for run in (probe, inspection):
            if run is not None and run.proc.poll() is None:
                run.stop()
    declared = declared_requirements(Path(config.root))
    env = mark_used(env, used_closure(env, scan.modules, declared))
    env, requested_from = truthful_requested(env, set(scan.modules), declared)
    return ProjectCapture(env, python, data, code, scan.problems, unmatched, stack, frozenset(scan.modules),
                          requested_from)
