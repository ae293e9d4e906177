"""`holotype accept`: take the current outputs as the new baselines, and log who, when and why."""

from __future__ import annotations

import getpass
import hashlib
from pathlib import Path

from holotype.baselines import BaselineStore
from holotype.commands.record import ensure_store, timestamp
from holotype.commands.rerun import select_analyses
from holotype.config import load_config
from holotype.errors import HolotypeError, InputError
from holotype.findings import Finding, Report
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock, write_lock
from holotype.project_lock import project_lock
from holotype.records import AnalysisRecord, HistoryEntry, OutputRecord
from holotype.seeds import derive_seed


def _who() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return "unknown"


def accept_outputs(root: Path, names: list[str] | None, reason: str) -> Report:
    """Store each selected analysis' current output files as baselines and append a history entry."""
    root = Path(root)
    if not reason or not reason.strip():
        raise HolotypeError("accept needs --reason TEXT: say why the new results replace the recorded ones")
    config = load_config(root)
    with project_lock(root):
        ensure_store(root)
        lock = read_lock(root / LOCK_NAME)
        analyses = select_analyses(config, names)
        seed = config.seed if config.seed is not None else lock.project_seed
        if seed is None:
            raise HolotypeError("no project seed; run holotype record first", config.source)
        store = BaselineStore(root)
        changes: list[tuple[str, str, str]] = []
        findings: list[Finding] = []
        updated = dict(lock.analyses)
        for analysis in analyses:
            outputs = {}
            old = lock.analyses.get(analysis.name)
            for out in analysis.outputs:
                try:
                    data = (root / out).read_bytes()
                except OSError as exc:
                    raise InputError(f"cannot take output of '{analysis.name}': {exc.strerror}", root / out) from None
                digest = hashlib.sha256(data).hexdigest()
                store.put(data)
                previous = old.outputs[out].sha256 if old is not None and out in old.outputs else ""
                if previous != digest:
                    changes.append((out, previous, digest))
                    findings.append(Finding("output", out, "lockfile.note",
                                            f"new baseline {digest[:12]}… (was {previous[:12] or 'none'}…)",
                                            previous or None, digest))
                outputs[out] = OutputRecord(out, digest, len(data), config.rulebook.for_output(out).summary())
            updated[analysis.name] = AnalysisRecord(analysis.name, analysis.run, derive_seed(seed, analysis.name),
                                                    outputs, analysis.inputs)
        lock.analyses = updated
        lock.project_seed = seed
        lock.history.append(HistoryEntry(when=timestamp(), who=_who(), reason=reason.strip(),
                                         analyses=tuple(a.name for a in analyses), changes=tuple(changes)))
        write_lock(root / LOCK_NAME, lock)
    note = f"accepted {len(changes)} changed output(s) of {', '.join(a.name for a in analyses)}; reason logged"
    return Report("accept", apply_policy(findings), notes=(note,))
