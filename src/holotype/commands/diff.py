"""`holotype diff A.lock B.lock` and `holotype diff --rev REV`: what differs between two records."""

from __future__ import annotations

import subprocess
from pathlib import Path

from holotype.compare.locks import diff_locks
from holotype.config import load_config
from holotype.errors import HolotypeError
from holotype.findings import Judgement
from holotype.findings.policy import apply_policy
from holotype.lockfile import LOCK_NAME, parse_lock, read_lock
from holotype.store import BaselineStore


def lock_at_revision(root: Path, rev: str) -> tuple[str, Path]:
    """The text of the project's holotype.lock as committed at `rev` (via git show)."""
    label = Path(f"{rev}:{LOCK_NAME}")
    try:
        prefix = subprocess.run(["git", "rev-parse", "--show-prefix"], cwd=root, capture_output=True, text=True,
                                check=True).stdout.strip()
    except FileNotFoundError:
        raise HolotypeError("diff --rev needs git, which is not on PATH") from None
    except subprocess.CalledProcessError:
        raise HolotypeError("not inside a git repository; diff --rev reads the lock committed at a revision",
                            root) from None
    shown = subprocess.run(["git", "show", f"{rev}:{prefix}{LOCK_NAME}"], cwd=root, capture_output=True, text=True)
    if shown.returncode != 0:
        reason = (shown.stderr.strip().splitlines() or ["unknown revision"])[-1].removeprefix("fatal: ")
        raise HolotypeError(f"cannot read {LOCK_NAME} at revision {rev}: {reason}")
    return shown.stdout, label


def diff_files(a: Path, b: Path, policy_root: Path | None = None) -> Judgement:
    """Two lockfiles against each other (policy from the project at `policy_root`, if given)."""
    lock_a, lock_b = read_lock(a), read_lock(b)
    policy = load_config(policy_root, required=False).policy if policy_root else {}
    store = BaselineStore(policy_root) if policy_root is not None else None
    findings = diff_locks(lock_a, lock_b, a.name if a.name != b.name else str(a), b.name if a.name != b.name
                          else str(b), store)
    return Judgement("diff", apply_policy(findings, policy), notes=(f"{a} → {b}",),
                  warnings=lock_a.notices + lock_b.notices)


def diff_revision(root: Path, rev: str) -> Judgement:
    """The lock committed at `rev` against the working copy's."""
    text, label = lock_at_revision(root, rev)
    old = parse_lock(text, label)
    new = read_lock(root / LOCK_NAME)
    findings = diff_locks(old, new, rev, "the working copy", BaselineStore(root))
    return Judgement("diff", apply_policy(findings, load_config(root, required=False).policy),
                  notes=(f"{LOCK_NAME} at {rev} → working copy",), warnings=old.notices + new.notices)
