"""What every format comparer returns: tallies per compared unit, typed problems, layout notes."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from holotype.compare.tally import Tally


@dataclass(frozen=True)
class Problem:
    """Something about an output's shape or setup that is not a value comparison (`kind` is a policy kind)."""

    kind: str
    message: str
    expected: Any = None
    actual: Any = None


@dataclass
class Outcome:
    tallies: list[Tally] = field(default_factory=list)
    problems: list[Problem] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    hints: list[str] = field(default_factory=list)  # added to a failing finding: what would explain or skip it
    picture: bytes | None = None  # a PNG showing where an image differs, for the replay to keep beside its log

    def problem(self, kind: str, message: str, expected: Any = None, actual: Any = None) -> None:
        self.problems.append(Problem(kind, message, expected, actual))
