"""Text outputs (a printed model summary, LaTeX and Markdown tables, logs): compared token by token.

Numbers are compared with the tolerance, words exactly, and a run of white space is one separator
(`whitespace = "exact"` keeps spacing exact). Lines matching a `skip_lines` expression are left out
on both sides; text matching a `mask` expression is not compared. When a failing output differs only
in dates, times or durations, the finding says so and shows the rule that would skip those lines.
"""

from __future__ import annotations

import re

from holotype.compare.formats import register
from holotype.compare.judge import ColumnJudge
from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.compare.tokens import number_array, numbers_of, only_time_differs, split_numbers
from holotype.errors import UnreadableOutput
from holotype.tolerance import RuleBook, Tolerance

TEXT_SUFFIXES = (".txt", ".log", ".out", ".text", ".tex", ".md", ".markdown", ".html", ".htm", ".xml", ".rst",
                 ".yaml", ".yml")
MASKED = "⟪masked⟫"


def decode_lines(data: bytes, label: str) -> list[str]:
    try:
        return data.decode("utf-8-sig").splitlines()
    except UnicodeDecodeError as exc:
        raise UnreadableOutput(f"not UTF-8 text (byte {exc.start})", label) from None


def _prepared(lines: list[str], tol: Tolerance, extra_masks: tuple[re.Pattern[str], ...] = ()) -> list[
        tuple[int, str]]:
    """(line number, text) with skipped lines left out and masked text replaced."""
    skips = [re.compile(p) for p in tol.skip_lines]
    masks = [*extra_masks, *(re.compile(p) for p in tol.mask)]
    out: list[tuple[int, str]] = []
    for n, line in enumerate(lines, start=1):
        if any(p.search(line) for p in skips):
            continue
        for p in masks:
            line = p.sub(MASKED, line)
        out.append((n, line))
    return out


def _judge_lines(e_lines: list[tuple[int, str]], a_lines: list[tuple[int, str]], tol: Tolerance,
                 where_prefix: str = "") -> tuple[ColumnJudge, list[tuple[str, str]]]:
    """Judge paired lines; also return the unequal pairs (for the date-and-time hint)."""
    judge_ = ColumnJudge("text", tol)
    exact_space = tol.whitespace == "exact"
    e_vals: list[float | int] = []
    a_vals: list[float | int] = []
    where: list[str] = []
    unequal: list[tuple[str, str]] = []
    for (n, el), (_, al) in zip(e_lines, a_lines):
        if el == al:
            judge_.exact(True, f"{where_prefix}line {n}", el, al)
            continue
        unequal.append((el, al))
        e_shape, e_nums = split_numbers(el, exact_space=exact_space)
        a_shape, a_nums = split_numbers(al, exact_space=exact_space)
        if e_shape != a_shape or len(e_nums) != len(a_nums):
            judge_.exact(False, f"{where_prefix}line {n}", el.strip()[:120], al.strip()[:120])
            continue
        if not e_nums:
            judge_.exact(True, f"{where_prefix}line {n}", el, al)
        e_vals += numbers_of(e_nums)
        a_vals += numbers_of(a_nums)
        where += [f"{where_prefix}line {n}, number {k}" for k in range(1, len(e_nums) + 1)]
    if e_vals:
        judge_.numeric(number_array(e_vals), number_array(a_vals), where.__getitem__)
    return judge_, unequal


def _time_hint(e_lines: list[tuple[int, str]], unequal: list[tuple[str, str]]) -> str | None:
    """When every unequal line differs only in dates, times or durations: the rule that would skip them."""
    if not unequal or not all(only_time_differs(e, a) for e, a in unequal):
        return None
    heads: list[str] = []
    for e, _ in unequal:
        head = re.match(r"\s*([A-Za-z][\w .()-]{0,30}?:)", e)
        pattern = "^\\s*" + re.escape(head.group(1)) if head else re.escape(e.strip()[:20])
        if pattern not in heads:
            heads.append(pattern)
    shown = ", ".join('"' + h.replace("\\", "\\\\") + '"' for h in heads[:4])
    return (f"the lines that differ hold only dates, times or durations; a rule with skip_lines = [{shown}] "
            "for this output would skip them")


def compare_lines(e_raw: list[str], a_raw: list[str], tol: Tolerance, outcome: Outcome, *,
                  extra_masks: tuple[re.Pattern[str], ...] = (), where_prefix: str = "",
                  name: str = "text") -> None:
    """Compare two texts' lines into `outcome` (one tally; a line-count difference is a shape problem)."""
    e_lines, a_lines = _prepared(e_raw, tol, extra_masks), _prepared(a_raw, tol, extra_masks)
    judge_, unequal = _judge_lines(e_lines, a_lines, tol, where_prefix)
    tally = judge_.result()
    tally.name = name
    outcome.tallies.append(tally)
    if len(e_lines) != len(a_lines):
        skipped = " (after skipped lines)" if tol.skip_lines else ""
        outcome.problem("output.shape", f"{where_prefix}{len(e_lines):,} lines recorded, {len(a_lines):,} "
                        f"found{skipped}", len(e_lines), len(a_lines))
    elif tally.mismatches:
        hint = _time_hint(e_lines, unequal)
        if hint:
            outcome.hints.append(hint)


def compare_text(output: str, expected: Source, actual: Source, rules: RuleBook,
                 extra_masks: tuple[re.Pattern[str], ...] = ()) -> Outcome:
    outcome = Outcome()
    compare_lines(decode_lines(expected.read_bytes(), expected.label),
                  decode_lines(actual.read_bytes(), actual.label), rules.for_output(output), outcome,
                  extra_masks=extra_masks)
    return outcome


TEXT_HONOURS = frozenset({"skip_lines", "mask", "whitespace"})


class TextFormat:
    name: str = "text"
    suffixes: tuple[str, ...] = TEXT_SUFFIXES
    honours: frozenset[str] = TEXT_HONOURS

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        return compare_text(output, expected, actual, rules)


register(TextFormat())

