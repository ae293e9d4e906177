"""The declared analyses and seeds against what the lock recorded (check and replay both ask this)."""

from __future__ import annotations

from holotype.config import Config
from holotype.errors import BaselineError
from holotype.findings import Finding
from holotype.records import LockContents, inputs_digest
from holotype.seeds import derive_seed
from holotype.store import BASELINE_FOLDER, STORE_FOLDER, BaselineStore


def compare_project_seed(config: Config, lock: LockContents, *, ran_with: int | None = None) -> list[Finding]:
    """The config's project seed against the recorded one (`ran_with`: the seed a replay used)."""
    recorded, now = lock.project_seed, config.seed
    if recorded is None or now == recorded:
        return []
    if now is None:
        return [Finding("seed", "project", "seed.changed", f"project seed {recorded} recorded, none in the config",
                        recorded, None)]
    tail = (f"; analyses ran with {ran_with}, so their outputs show what the new seed changes"
            if ran_with is not None else "")
    return [Finding("seed", "project", "seed.changed", f"project seed {recorded} recorded, {now} in the config{tail}",
                    recorded, now)]


def compare_analyses(config: Config, lock: LockContents, names: list[str] | None = None) -> list[Finding]:
    """Declared analyses (all, or `names`) against the recorded ones: missing, new, changed command or outputs."""
    out: list[Finding] = []
    declared = {a.name: a for a in config.analyses}
    wanted = set(names) if names else None
    for name, rec in sorted(lock.analyses.items()):
        if wanted is not None and name not in wanted:
            continue
        if name not in declared:
            out.append(Finding("analysis", name, "analysis.missing", "recorded, no longer declared in the config",
                               rec.command, None))
            continue
        a = declared[name]
        if a.command != rec.command:
            out.append(Finding("analysis", name, "analysis.changed",
                               f"command changed: '{rec.command}' recorded, '{a.command}' in the config",
                               rec.command, a.command))
        if rec.observed or rec.timeout is not None:
            if a.timeout != rec.timeout:
                out.append(Finding("analysis", name, "analysis.changed",
                                   f"timeout {rec.timeout or 'none'} recorded, {a.timeout or 'none'} in the config",
                                   rec.timeout, a.timeout))
        if rec.made_from and rec.made_from != inputs_digest(lock.data, rec.inputs):
            out.append(Finding("analysis", name, "analysis.stale",
                               "its baselines were made from other data than the data recorded now; replay it to "
                               "see what the current data give, then adopt", rec.made_from, None))
        if set(a.outputs) != set(rec.outputs):
            out.append(Finding("analysis", name, "analysis.changed", "declared outputs differ from the recorded ones",
                               sorted(rec.outputs), sorted(a.outputs)))
        if lock.project_seed is not None and rec.seed != derive_seed(lock.project_seed, name):
            out.append(Finding("seed", name, "seed.changed", "recorded seed does not follow from the project seed",
                               derive_seed(lock.project_seed, name), rec.seed))
    for name, a in declared.items():
        if name not in lock.analyses and (wanted is None or name in wanted):
            out.append(Finding("analysis", name, "analysis.changed", "declared but never recorded; run holotype record",
                               None, a.command))
    return out


def check_baselines(store: BaselineStore, lock: LockContents, *, verify: bool) -> list[Finding]:
    """Every recorded output has its baseline object; with `verify`, its bytes match the digest too."""
    findings: list[Finding] = []
    for rec in lock.analyses.values():
        for out, o in sorted(rec.outputs.items()):
            if verify:
                try:
                    store.get(o.sha256, o.size)
                except BaselineError as exc:
                    findings.append(Finding("output", out, "output.baseline", exc.detail, o.sha256, None))
            elif not store.has(o.sha256):
                findings.append(Finding("output", out, "output.baseline",
                                        f"baseline {o.sha256[:12]}… is missing from {STORE_FOLDER}/{BASELINE_FOLDER} "
                                        "(was .holotype/ committed?)", o.sha256, None))
    return findings
