"""`holotype adopt`: take the current outputs as the new baselines, and log who, when and why."""

from __future__ import annotations

import hashlib
from dataclasses import replace
from pathlib import Path

from holotype.capture.project import capture_project
from holotype.clock import current_user, timestamp
from holotype.compare.digests import compare_data, compare_file_sets
from holotype.compare.judgement import config_judgement
from holotype.config import load_config
from holotype.errors import HolotypeError, InputError
from holotype.findings import Finding, Judgement
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, read_lock, write_lock
from holotype.manifests import LISTING_LEVEL
from holotype.records import AnalysisRecord, Change, HistoryEntry, OutputRecord, inputs_digest
from holotype.safe_files import inside, read_regular
from holotype.seeds import derive_seed
from holotype.store import ProjectStore


def adopt_outputs(root: Path, names: list[str] | None, reason: str) -> Judgement:
    """Take the outputs of the last replay as the new baselines, with the data and code digests as they are,
    under one history entry with the reason.

    Only outputs a holotype replay in this checkout produced, and whose digests it noted, are taken; an
    output changed since (edited by hand, written by something else) is refused with one line naming it."""
    root = Path(root)
    if not reason or not reason.strip():
        raise HolotypeError("adopt needs --reason TEXT: say why the new results replace the recorded ones")
    config = load_config(root)
    store = ProjectStore(root)
    with store.one_writer():
        store.prepare()
        lock = read_lock(root / LOCK_NAME)
        analyses = config.select(names)
        seed = config.seed_to_use(lock.project_seed)
        verified = store.last_replay().get("outputs")
        verified = verified if isinstance(verified, dict) else {}
        changes: list[Change] = []
        findings: list[Finding] = []
        taken: list[bytes] = []
        updated = dict(lock.analyses)
        for analysis in analyses:
            outputs = {}
            old = lock.analyses.get(analysis.name)
            for out in analysis.outputs:
                if not inside(root, root / out):
                    raise InputError(f"output of '{analysis.name}' leads outside the project through a symbolic "
                                     "link; holotype never stores such a file", root / out)
                try:
                    data = read_regular(root / out, what="the output")
                except InputError as exc:
                    raise InputError(f"cannot take output of '{analysis.name}': {exc.detail}", root / out) from None
                digest = hashlib.sha256(data).hexdigest()
                seen = verified.get(out)
                if not isinstance(seen, str):
                    raise InputError(f"no replay in this checkout produced this output of '{analysis.name}'; run "
                                     f"'holotype replay {analysis.name}', read its findings, then adopt", root / out)
                if seen != digest:
                    raise InputError(f"changed since the replay that produced it (SHA-256 {seen[:12]}… then, "
                                     f"{digest[:12]}… now); holotype adopts only outputs of a verified run: replay "
                                     "again", root / out)
                taken.append(data)
                previous = old.outputs[out].sha256 if old is not None and out in old.outputs else ""
                if previous != digest:
                    changes.append(Change(out, previous, digest))
                    findings.append(Finding("output", out, "lockfile.note",
                                            f"new baseline {digest[:12]}… (was {previous[:12] or 'none'}…)",
                                            previous or None, digest))
                outputs[out] = OutputRecord(out, digest, len(data), config.rulebook.for_output(out).summary())
            updated[analysis.name] = AnalysisRecord(
                analysis.name, analysis.command, derive_seed(seed, analysis.name), outputs, analysis.inputs,
                old.modules if old else (), old.libraries if old else (), old.observed if old else False,
                analysis.timeout)
        capture = capture_project(config, numerics=False, listings=True)  # the inputs these outputs were made from
        for data in taken:
            store.baselines.put(data)
        for listing in capture.data.listings.values():
            store.baselines.put(listing, LISTING_LEVEL)
        changed = compare_data(store.baselines, lock.data, lock.data_folders, capture.data.records,
                               capture.data.folders, capture.data.every_folder_file())
        for f in changed + compare_file_sets("code", lock.code, capture.code.records):
            findings.append(Finding(f.area, f.subject, "lockfile.note", f"re-recorded with the baselines: {f.message}"))
        lock.data, lock.data_folders, lock.code = capture.data.records, capture.data.folders, capture.code.records
        for analysis in analyses:  # the adopted outputs were made from the data as it is now
            updated[analysis.name] = replace(updated[analysis.name],
                                             made_from=inputs_digest(lock.data, analysis.inputs, lock.data_folders))
        lock.analyses = updated
        lock.project_seed = seed
        lock.judgement = config_judgement(config)  # what judged the adopted outputs, logged with the reason
        lock.history.append(HistoryEntry(when=timestamp(), who=current_user(), reason=reason.strip(),
                                         analyses=tuple(a.name for a in analyses), changes=tuple(changes)))
        write_lock(root / LOCK_NAME, lock)
        referenced = {o.sha256 for rec in lock.analyses.values() for o in rec.outputs.values()}
        stale = len(store.baselines.unreferenced(referenced))
    notes = [f"adopted {len(changes)} changed output(s) of {', '.join(a.name for a in analyses)}; reason logged"]
    if stale:
        notes.append(f"{stale} baseline object(s) are no longer referenced; 'holotype tidy' lists them")
    return Judgement("adopt", apply_policy(findings), notes=tuple(notes), warnings=config.warnings + lock.notices)
