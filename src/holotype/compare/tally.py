"""Running totals for one compared unit (a column, a JSON path group, an array), chunk after chunk."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from holotype.compare.numbers import MAX_LRE, Verdict
from holotype.findings import json_number
from holotype.phrasing import clip
from holotype.tolerance import Tolerance

EXAMPLES_KEPT = 5


def _sort_decades(counts: dict[str, int]) -> dict[str, int]:
    def key(label: str) -> float:
        return -math.inf if label == "exact" else math.inf if label == "inf" else float(label[2:])
    return {k: counts[k] for k in sorted(counts, key=key)}


@dataclass
class Tally:
    """Compared, mismatched, largest errors, where the worst sits, and the spread of errors by decade."""

    name: str
    tolerance: Tolerance
    compared: int = 0
    mismatches: int = 0
    max_abs: float = 0.0
    max_rel: float = 0.0
    min_lre: float = MAX_LRE
    worst_where: str | None = None
    worst_expected: Any = None
    worst_actual: Any = None
    worst_failed: bool = False
    decades: dict[str, int] = field(default_factory=dict)
    examples: list[str] = field(default_factory=list)
    sign_flipped: bool = False
    _worst_rel: float = 0.0

    def add_numeric(self, expected: np.ndarray, actual: np.ndarray, verdict: Verdict,
                    where: Any) -> None:
        """Fold one chunk of numeric comparisons in; `where(i)` names position i of the chunk."""
        n = int(expected.shape[0])
        if n == 0:
            return
        self.compared += n
        failed = ~verdict.passed
        nfail = int(failed.sum())
        self.mismatches += nfail
        abs_err, rel_err = verdict.abs_err, verdict.rel_err
        self.max_abs = max(self.max_abs, float(abs_err.max()))
        chunk_max_rel = float(rel_err.max())
        self.max_rel = max(self.max_rel, chunk_max_rel)
        # LRE falls as the relative error grows, so the chunk's least LRE is that of its largest finite
        # relative error (the same |a-e|/|e|, absolute where e == 0): one log instead of one per value
        if verdict.all_finite:
            worst: float | None = chunk_max_rel
        else:
            finite = np.isfinite(expected) & np.isfinite(actual)
            worst = float(np.max(rel_err, where=finite, initial=0.0)) if finite.any() else None
        if worst is not None:
            self.min_lre = min(self.min_lre, MAX_LRE if worst == 0 else
                               float(np.clip(-np.log10(worst), 0.0, MAX_LRE)) if math.isfinite(worst) else 0.0)
        elif nfail:
            self.min_lre = 0.0
        # decade histogram of relative errors
        nonzero = rel_err[rel_err != 0]
        exact = n - int(nonzero.size)
        if exact:
            self.decades["exact"] = self.decades.get("exact", 0) + exact
        if nonzero.size:
            infinite = ~np.isfinite(nonzero)
            if infinite.any():
                self.decades["inf"] = self.decades.get("inf", 0) + int(infinite.sum())
                nonzero = nonzero[~infinite]
            with np.errstate(divide="ignore"):  # in place: `nonzero` is a copy, and fresh memory costs
                np.floor(np.log10(nonzero, out=nonzero), out=nonzero)
            exps = nonzero.astype(np.int64)
            if exps.size:
                low = int(exps.min())
                counts = np.bincount(np.subtract(exps, low, out=exps))  # a few hundred decades: counting beats sorting
                for offset in np.flatnonzero(counts).tolist():
                    label = f"1e{low + offset}"
                    self.decades[label] = self.decades.get(label, 0) + int(counts[offset])
        # the worst value: the largest relative error, failures first
        if nfail:
            pool = np.flatnonzero(failed)
            i = int(pool[np.argmax(rel_err[pool])])
        else:
            i = int(np.argmax(rel_err))
        if (nfail and not self.worst_failed) or (bool(nfail) == self.worst_failed and
                                                  (self.worst_where is None or float(rel_err[i]) > self._worst_rel)):
            self.worst_where = where(i)
            self.worst_expected = float(expected[i])
            self.worst_actual = float(actual[i])
            self.worst_failed = bool(nfail)
            self._worst_rel = float(rel_err[i])
        if nfail and len(self.examples) < EXAMPLES_KEPT:
            for j in np.where(failed)[0][: EXAMPLES_KEPT - len(self.examples)].tolist():
                self.examples.append(f"{where(j)}: {expected[j]!r} recorded, {actual[j]!r} found")

    def add_exact(self, equal: bool, where: str, expected: Any, actual: Any) -> None:
        """One non-numeric cell (text, missing, or a kind mismatch) compared exactly (long values kept clipped)."""
        self.compared += 1
        expected, actual = clip(expected), clip(actual)
        if equal:
            self.decades["exact"] = self.decades.get("exact", 0) + 1
            return
        self.mismatches += 1
        self.decades["inf"] = self.decades.get("inf", 0) + 1
        self.max_abs = self.max_rel = math.inf
        self.min_lre = 0.0
        if not self.worst_failed or self.worst_where is None:
            self.worst_where, self.worst_expected, self.worst_actual = where, expected, actual
            self.worst_failed = True
            self._worst_rel = math.inf
        if len(self.examples) < EXAMPLES_KEPT:
            self.examples.append(f"{where}: {expected!r} recorded, {actual!r} found")

    def merge(self, other: Tally) -> None:
        """Fold another tally (same output) into this one, for output-level totals."""
        self.compared += other.compared
        self.mismatches += other.mismatches
        self.max_abs = max(self.max_abs, other.max_abs)
        self.max_rel = max(self.max_rel, other.max_rel)
        self.min_lre = min(self.min_lre, other.min_lre)
        for k, v in other.decades.items():
            self.decades[k] = self.decades.get(k, 0) + v
        better = other.worst_where is not None and (
            (other.worst_failed and not self.worst_failed)
            or (other.worst_failed == self.worst_failed
                and (self.worst_where is None or other._worst_rel > self._worst_rel)))
        if better:
            self.worst_where, self.worst_expected, self.worst_actual = (other.worst_where, other.worst_expected,
                                                                        other.worst_actual)
            self.worst_failed, self._worst_rel = other.worst_failed, other._worst_rel
        for ex in other.examples:
            if len(self.examples) < EXAMPLES_KEPT:
                self.examples.append(ex)

    def sorted_decades(self) -> dict[str, int]:
        return _sort_decades(self.decades)

    def detail(self) -> dict[str, Any]:
        """Per-unit figures for JSON output."""
        return {
            "name": self.name,
            "compared": self.compared,
            "mismatches": self.mismatches,
            "max_abs_err": json_number(self.max_abs),
            "max_rel_err": json_number(self.max_rel),
            "min_lre": round(self.min_lre, 2),
            "tolerance": self.tolerance.describe(),
            "worst": self.worst_where,
            "sign_flipped": self.sign_flipped,
        }

