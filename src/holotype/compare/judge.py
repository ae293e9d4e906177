"""The column judge every format feeds, and the column plan shared by the table formats."""

from __future__ import annotations

from collections.abc import Callable
from fnmatch import fnmatchcase
from typing import Any

import numpy as np

from holotype.compare.cells import MISSING, NUMBER, TEXT, column_arrays
from holotype.compare.numbers import EXACT_INTEGERS, as_binary64, integer_gaps, judge, settle_gaps
from holotype.compare.outcome import Outcome
from holotype.compare.tally import Tally, fold_numeric
from holotype.compare.tokens import embedded_numbers, exact_number, number_array
from holotype.phrasing import clip, listed
from holotype.tolerance import RuleBook, Tolerance

Where = Callable[[int], str]


class ColumnJudge:
    """Compares one unit (a column, a JSON path group, an array) chunk by chunk.

    A sign-free unit keeps a flipped tally too, and the orientation that fits wins as a whole.
    """

    def __init__(self, name: str, tol: Tolerance) -> None:
        self.tally = Tally(name, tol)
        self.flipped = Tally(name, tol) if tol.sign_free else None

    def feed(self, expected: Any, actual: Any, where: Where) -> None:
        """A chunk of cells of any kind: numbers numerically, text and missing values exactly."""
        e_num, e_kind, e_obj = column_arrays(expected)
        a_num, a_kind, a_obj = column_arrays(actual)
        # integers go in as they are (beyond 2**53 they are judged exactly), and so does a numeric column's cell
        # shown in a message
        e_exact, a_exact = _integers_kept(expected, e_num), _integers_kept(actual, a_num)
        if e_kind is None and a_kind is None:
            self.numeric(e_exact, a_exact, where)
            return
        n = e_num.shape[0]
        ek = e_kind if e_kind is not None else np.zeros(n, dtype=np.int8)
        ak = a_kind if a_kind is not None else np.zeros(n, dtype=np.int8)
        both_num = (ek == NUMBER) & (ak == NUMBER)
        idx = np.where(both_num)[0]
        if idx.size:
            self.numeric(_exact_cells(e_exact, e_obj, idx), _exact_cells(a_exact, a_obj, idx),
                         lambda i: where(int(idx[i])))
        inside_e: list[float | int] = []
        inside_a: list[float | int] = []
        inside_where: list[str] = []
        for i in np.where(~both_num)[0].tolist():
            if ek[i] == MISSING and ak[i] == MISSING:
                equal = True
            elif ek[i] == TEXT and ak[i] == TEXT:
                e_text, a_text = str(e_obj[i]), str(a_obj[i])  # type: ignore[index]
                equal = e_text == a_text
                pair = None if equal else embedded_numbers(e_text, a_text)
                if pair is not None:  # the same text around numbers ('143.7:350.5', '12.3 (0.4)'): numbers
                    inside_e += pair[0]
                    inside_a += pair[1]
                    inside_where += [f"{where(i)}, number {k} in the cell" for k in range(1, len(pair[0]) + 1)]
                    continue
            else:
                equal = False
            e_val = "(missing)" if ek[i] == MISSING else (e_obj[i] if e_obj is not None else e_exact[i].item())
            a_val = "(missing)" if ak[i] == MISSING else (a_obj[i] if a_obj is not None else a_exact[i].item())
            self.exact(equal, where(i), e_val, a_val)
        if inside_e:
            self.numeric(number_array(inside_e), number_array(inside_a), inside_where.__getitem__)

    def text(self, expected: str, actual: str, where: str) -> None:
        """Two strings (a JSON string, say): equal, or the same text around numbers compared numerically."""
        pair = None if expected == actual else embedded_numbers(expected, actual)
        if pair is None:
            self.exact(expected == actual, where, expected, actual)
            return
        count = len(pair[0])
        self.numeric(number_array(pair[0]), number_array(pair[1]),
                     lambda k: f"{where}, number {k + 1} in the string" if count > 1 else where)

    def exact(self, equal: bool, where: str, expected: Any, actual: Any) -> None:
        """One cell compared exactly (text, missing, or kinds that differ); sign plays no part."""
        self.tally.add_exact(equal, where, expected, actual)
        if self.flipped is not None:
            self.flipped.add_exact(equal, where, expected, actual)

    def numeric(self, e: np.ndarray, a: np.ndarray, where: Where) -> None:
        """Numbers of any kind; integers beyond 2**53 that binary64 cannot tell apart are judged exactly."""
        tol = self.tally.tolerance
        e64, a64 = as_binary64(e), as_binary64(a)
        gaps = integer_gaps(e, a, e64, a64)
        shown = (e, a) if gaps is not None else None  # exact integers for the worst value's message
        self.tally.add_numeric(e64, a64, settle_gaps(judge(e64, a64, tol), gaps, tol), where, shown)
        if self.flipped is not None:
            neg = -a64
            gaps = integer_gaps(e, a, e64, a64, negate=True)
            self.flipped.add_numeric(e64, neg, settle_gaps(judge(e64, neg, tol), gaps, tol), where)

    def result(self) -> Tally:
        """The orientation that fits: a sign-free unit may be flipped as a whole, never value by value."""
        if self.flipped is not None and self.flipped.mismatches < self.tally.mismatches:
            self.flipped.sign_flipped = True
            return self.flipped
        return self.tally


def _exact_cells(numbers: np.ndarray, cells: np.ndarray | None, idx: np.ndarray) -> np.ndarray:
    """The numbers at `idx` (integers as they are), with text cells beyond 2**53 read again as written (an
    integer stays exact)."""
    picked: np.ndarray = numbers[idx]
    if cells is None or picked.dtype.kind != "f":
        return picked
    with np.errstate(invalid="ignore"):
        big = np.flatnonzero(np.abs(picked) >= EXACT_INTEGERS)
    if not big.size:
        return picked
    out: np.ndarray = picked.astype(object)
    for k in big.tolist():
        cell = cells[int(idx[k])]
        if isinstance(cell, int) and not isinstance(cell, bool):
            out[k] = cell
        elif isinstance(cell, str):
            value = exact_number(cell.strip())  # the cell parsed as a number once already
            if isinstance(value, int):
                out[k] = value
    return out


def _integers_kept(values: Any, numbers: np.ndarray) -> np.ndarray:
    arr = np.asarray(values)
    return arr if arr.dtype.kind in "iu" else numbers


def feed_numeric_block(judges: list[ColumnJudge], expected: np.ndarray, actual: np.ndarray,
                       wheres: list[Where]) -> None:
    """Numeric columns that share one tolerance, judged as one 2-D block (column j feeds `judges[j]`):
    the same figures as feeding each column, in a few array passes for a table of many columns."""
    tol = judges[0].tally.tolerance
    fold_numeric([j.tally for j in judges], expected, actual, judge(expected, actual, tol), wheres)
    if tol.sign_free:
        neg = -actual
        fold_numeric([j.flipped for j in judges if j.flipped is not None], expected, neg,
                     judge(expected, neg, tol), wheres)


def plan_columns(output: str, e_cols: list[str], a_cols: list[str], rules: RuleBook, outcome: Outcome) -> list[str]:
    """The columns to compare: shared by name, minus ignored and key columns; shape problems noted."""
    whole = rules.for_output(output)
    e_set, a_set = set(e_cols), set(a_cols)  # sets: a table of 100,000 columns stays linear
    shared = [c for c in e_cols if c in a_set]
    shared_set = set(shared)
    only_e = [c for c in e_cols if c not in a_set]
    only_a = [c for c in a_cols if c not in e_set]
    if only_e:
        outcome.problem("output.shape", f"column(s) missing: {listed(clip(c) for c in only_e)}", len(only_e), None)
    if only_a:
        outcome.problem("output.shape", f"new column(s): {listed(clip(c) for c in only_a)}", None, len(only_a))
    if [c for c in a_cols if c in shared_set] != shared:
        outcome.notes.append("columns are in a different order (matched by name)")
    if len(e_set) != len(e_cols) or len(a_set) != len(a_cols):
        outcome.problem("output.shape", "duplicate column names; only the first of each is compared")
    keys = set(whole.key)
    return [c for c in shared if c not in keys and not any(fnmatchcase(c, g) for g in whole.ignore)]
