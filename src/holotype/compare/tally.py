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
    sign_flipped: bool = False
    _worst_rel: float = 0.0

    def add_numeric(self, expected: np.ndarray, actual: np.ndarray, verdict: Verdict,
                    where: Any, shown: tuple[np.ndarray, np.ndarray] | None = None) -> None:
        """Fold one chunk of numeric comparisons in; `where(i)` names position i of the chunk; `shown` are
        the values as read where binary64 would round them (integers beyond 2**53)."""
        column = Verdict(verdict.passed[:, None], verdict.abs_err[:, None], verdict.rel_err[:, None],
                         verdict.all_finite)
        fold_numeric([self], expected[:, None], actual[:, None], column, [where],
                     None if shown is None else (shown[0][:, None], shown[1][:, None]))

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


def _lre(worst: np.ndarray) -> np.ndarray:
    """The least LRE of each column from its largest finite relative error: LRE falls as the relative error
    grows, so this is one log per column instead of one per value (exact scores MAX_LRE, NaN or inf 0)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        lre = np.clip(-np.log10(worst), 0.0, MAX_LRE)
    return np.where(worst == 0, MAX_LRE, np.where(np.isfinite(worst), lre, 0.0))


def _plain(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


def fold_numeric(tallies: list[Tally], expected: np.ndarray, actual: np.ndarray, verdict: Verdict,
                 wheres: list[Any], shown: tuple[np.ndarray, np.ndarray] | None = None) -> None:
    """Fold a block of numeric comparisons in, column j of the 2-D arrays into `tallies[j]`; `wheres[j](i)`
    names row i of column j. The figures are computed for all columns at once, so a table of 100,000
    columns costs a few array passes and a short Python step per column, not a dozen NumPy calls each."""
    n, m = expected.shape
    if n == 0 or m == 0:
        return
    failed = ~verdict.passed
    nfail = failed.sum(axis=0)
    abs_err, rel_err = verdict.abs_err, verdict.rel_err
    max_abs = abs_err.max(axis=0)
    max_rel = rel_err.max(axis=0)
    if verdict.all_finite:
        least_lre = _lre(max_rel)
        judged = np.ones(m, dtype=bool)
    else:
        finite = np.isfinite(expected) & np.isfinite(actual)
        judged = finite.any(axis=0)
        least_lre = _lre(np.max(rel_err, axis=0, where=finite, initial=0.0))
    # decade histogram of relative errors: one bincount over (column, decade) for the whole block
    nonzero_mask = rel_err != 0
    nonzero = rel_err[nonzero_mask]  # row-major: the column of each value comes from np.nonzero below
    exact = n - nonzero_mask.sum(axis=0)
    decade_counts: list[tuple[int, str, int]] = []
    if nonzero.size:
        cols = np.nonzero(nonzero_mask)[1] if m > 1 else np.zeros(nonzero.size, dtype=np.int64)
        infinite = ~np.isfinite(nonzero)
        if infinite.any():
            for j, count in enumerate(np.bincount(cols[infinite], minlength=m).tolist()):
                if count:
                    decade_counts.append((j, "inf", count))
            nonzero, cols = nonzero[~infinite], cols[~infinite]
        if nonzero.size:
            with np.errstate(divide="ignore"):  # in place: `nonzero` is a copy, and fresh memory costs
                np.floor(np.log10(nonzero, out=nonzero), out=nonzero)
            exps = nonzero.astype(np.int64)
            low = int(exps.min())
            span = int(exps.max()) - low + 1  # a few hundred decades at most: counting beats sorting
            keys = np.subtract(exps, low, out=exps)
            if m > 1:
                keys += cols * span
            counts = np.bincount(keys)
            for key in np.flatnonzero(counts).tolist():
                decade_counts.append((key // span, f"1e{low + key % span}", int(counts[key])))
    # the worst value of each column: the largest relative error, failures first
    pick = np.where(failed | (nfail == 0), rel_err, -np.inf)
    worst_rows = np.argmax(pick, axis=0).tolist()
    worst_rel = np.take_along_axis(rel_err, np.asarray(worst_rows)[None, :], axis=0)[0].tolist()
    for j, (t, nf, top_abs, top_rel, lre, has, ex, i, rel) in enumerate(zip(
            tallies, nfail.tolist(), max_abs.tolist(), max_rel.tolist(), least_lre.tolist(), judged.tolist(),
            exact.tolist(), worst_rows, worst_rel)):
        t.compared += n
        t.mismatches += nf
        t.max_abs = max(t.max_abs, top_abs)
        t.max_rel = max(t.max_rel, top_rel)
        if has:
            t.min_lre = min(t.min_lre, lre)
        elif nf:
            t.min_lre = 0.0
        if ex:
            t.decades["exact"] = t.decades.get("exact", 0) + ex
        if (nf and not t.worst_failed) or (bool(nf) == t.worst_failed and
                                           (t.worst_where is None or rel > t._worst_rel)):
            t.worst_where = wheres[j](i)
            if shown is None:
                t.worst_expected, t.worst_actual = float(expected[i, j]), float(actual[i, j])
            else:
                t.worst_expected, t.worst_actual = _plain(shown[0][i, j]), _plain(shown[1][i, j])
            t.worst_failed = bool(nf)
            t._worst_rel = rel
    for j, label, count in decade_counts:
        decades = tallies[j].decades
        decades[label] = decades.get(label, 0) + count
