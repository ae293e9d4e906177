"""Plain-text outputs (a printed model summary, a log line): numbers compared numerically, the rest exactly."""

from __future__ import annotations

import re

import numpy as np

from holotype.compare.formats import register
from holotype.compare.judge import ColumnJudge
from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.errors import UnreadableOutput
from holotype.tolerance import RuleBook

NUMBER = re.compile(
    r"(?<![A-Za-z0-9_.])[-+]?(?:(?:\d+\.\d*|\.\d+|\d+)(?:[eE][-+]?\d+)?|inf(?:inity)?|nan)(?![A-Za-z0-9_])",
    re.IGNORECASE,
)


def split_numbers(line: str) -> tuple[str, list[str]]:
    """The line with each number replaced by a marker, and the numbers' texts."""
    numbers: list[str] = []

    def keep(m: re.Match[str]) -> str:
        numbers.append(m.group(0))
        return "\x00"

    return NUMBER.sub(keep, line), numbers


def _lines(src: Source) -> list[str]:
    try:
        return src.read_bytes().decode("utf-8").splitlines()
    except UnicodeDecodeError as exc:
        raise UnreadableOutput(f"not UTF-8 text (byte {exc.start})", src.label) from None


def compare_text(output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
    outcome = Outcome()
    e_lines, a_lines = _lines(expected), _lines(actual)
    judge_ = ColumnJudge("text", rules.for_output(output))
    e_vals: list[float] = []
    a_vals: list[float] = []
    where: list[str] = []
    for n, (el, al) in enumerate(zip(e_lines, a_lines), start=1):
        e_shape, e_nums = split_numbers(el)
        a_shape, a_nums = split_numbers(al)
        if e_shape != a_shape or len(e_nums) != len(a_nums):
            judge_.exact(False, f"line {n}", el.strip()[:120], al.strip()[:120])
            continue
        if not e_nums:
            judge_.exact(True, f"line {n}", el, al)
        for k, (x, y) in enumerate(zip(e_nums, a_nums), start=1):
            e_vals.append(float(x))
            a_vals.append(float(y))
            where.append(f"line {n}, number {k}")
    if e_vals:
        judge_.numeric(np.array(e_vals), np.array(a_vals), lambda i: where[i])
    if len(e_lines) != len(a_lines):
        outcome.problem("output.shape", f"{len(e_lines):,} lines recorded, {len(a_lines):,} found",
                        len(e_lines), len(a_lines))
    outcome.tallies = [judge_.result()]
    return outcome


class TextFormat:
    name: str = "text"
    suffixes: tuple[str, ...] = (".txt", ".log", ".out", ".text")
    honours: frozenset[str] = frozenset()

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        return compare_text(output, expected, actual, rules)


register(TextFormat())
