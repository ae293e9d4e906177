"""The search behind `holotype pinpoint`: the smallest set of changes that still moves a result.

`moves(subset)` runs the analyses with only `subset` of the changes applied (the others held at their
recorded state) and says whether an output still moves beyond tolerance. With everything applied it moves
(that is the failing replay).

The search first halves the candidates, most likely first, assuming one change is enough: a half that
moves alone is kept; when the first half does not, the second half is searched on the assumption that
it does, and the single change found is then run alone to prove it. That costs about log2(n) runs. When
the assumption fails (two changes move a number only together), the search falls back to delta debugging
(ddmin: A. Zeller and R. Hildebrandt, "Simplifying and Isolating Failure-Inducing Input", IEEE TSE 28(2),
2002), which finds a set from which no single change can be dropped. Every answer is run once more with
the opposite question — everything else applied, the set held at the record — which must not move.
Results are remembered, so no subset is run twice; `budget` bounds the runs.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Generic, TypeVar

T = TypeVar("T")


class OutOfRuns(Exception):
    """The run budget is spent (raised by the search itself, or by `moves` when a budget shared by several
    searches is)."""


@dataclass
class SearchResult(Generic[T]):
    culprits: list[T] = field(default_factory=list)  # the smallest set found (empty: none found)
    proven: bool = False  # the set moves alone, and everything else without it does not
    complement_moves: bool = False  # everything but the set still moves: not explained by it alone
    exhausted: bool = False  # the budget ran out before the search ended
    runs: int = 0
    tried: list[tuple[tuple[T, ...], bool]] = field(default_factory=list)  # every subset run, and its answer


class _Tester(Generic[T]):
    def __init__(self, changes: Sequence[T], moves: Callable[[list[T]], bool], budget: int) -> None:
        self.order = {c: i for i, c in enumerate(changes)}
        self.moves, self.budget = moves, budget
        self.known: dict[frozenset[T], bool] = {frozenset(changes): True}
        self.tried: list[tuple[tuple[T, ...], bool]] = []

    def __call__(self, subset: Sequence[T]) -> bool:
        key = frozenset(subset)
        if key not in self.known:
            if len(self.tried) >= self.budget:
                raise OutOfRuns()
            ordered = sorted(subset, key=self.order.__getitem__)
            answer = self.known[key] = bool(self.moves(ordered))
            self.tried.append((tuple(ordered), answer))
        return self.known[key]


def _halving(items: list[T], test: _Tester[T]) -> list[T] | None:
    """One change that moves alone, found by halving; None when no half explains it alone."""
    proven_moving = True
    while len(items) > 1:
        half = (len(items) + 1) // 2
        first, second = items[:half], items[half:]
        if test(first):
            items, proven_moving = first, True
        else:
            items, proven_moving = second, False
    if not proven_moving and not test(items):
        return None
    return items


def _ddmin(items: list[T], test: _Tester[T]) -> list[T]:
    """Zeller and Hildebrandt's ddmin: a 1-minimal subset of `items` (known to move) that still moves."""
    n = 2
    while len(items) >= 2:
        size = len(items) / n
        parts = [items[round(i * size):round((i + 1) * size)] for i in range(n)]
        parts = [p for p in parts if p]
        for part in parts:
            if test(part):
                items, n = part, 2
                break
        else:
            for part in parts:
                rest = [c for c in items if c not in part]
                if rest and test(rest):
                    items, n = rest, max(n - 1, 2)
                    break
            else:
                if n >= len(items):
                    break
                n = min(len(items), 2 * n)
    return items


def smallest_cause(changes: Sequence[T], moves: Callable[[list[T]], bool], budget: int) -> SearchResult[T]:
    """The smallest set of `changes` that moves the result, most likely changes first in `changes`."""
    test = _Tester(changes, moves, budget)
    result: SearchResult[T] = SearchResult()
    items = list(changes)
    try:
        found = _halving(items, test) if items else None
        if found is None and items:
            found = _ddmin(items, test)
        result.culprits = found or []
        if result.culprits:
            rest = [c for c in items if c not in result.culprits]
            result.complement_moves = test(rest)
            result.proven = not result.complement_moves and (len(result.culprits) == len(items)
                                                             or test(result.culprits))
    except OutOfRuns:
        result.exhausted = True
        moving = [set(s) for s, answer in test.tried if answer]
        best = min(moving, key=len) if moving else set(items)
        result.culprits = [c for c in items if c in best]
    result.runs, result.tried = len(test.tried), test.tried
    return result
