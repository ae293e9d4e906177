"""Parquet outputs (optional extra `holotype[parquet]`): read with pyarrow, compared as tables."""

from __future__ import annotations

import io

from holotype.compare.source import Source, UnreadableOutput
from holotype.compare.tables import ColumnJudge, TableOutcome, plan_columns
from holotype.compare.tolerance import RuleBook


def _read(src: Source):  # type: ignore[no-untyped-def]
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise UnreadableOutput("comparing Parquet needs the optional extra: pip install 'holotype[parquet]'",
                               src.label) from None
    try:
        return pq.read_table(io.BytesIO(src.read_bytes()))
    except Exception as exc:  # pyarrow raises its own error types for damaged files
        raise UnreadableOutput(f"not a readable Parquet file: {str(exc).splitlines()[0]}", src.label) from None


def compare_parquet(output: str, expected: Source, actual: Source, rules: RuleBook) -> TableOutcome:
    outcome = TableOutcome()
    e, a = _read(expected), _read(actual)
    compared, _ = plan_columns(output, list(e.column_names), list(a.column_names), rules, outcome)
    n = min(e.num_rows, a.num_rows)
    if e.num_rows != a.num_rows:
        outcome.problems.append(("output.shape", f"{e.num_rows:,} rows recorded, {a.num_rows:,} found",
                                 e.num_rows, a.num_rows))
    for c in compared:
        judge_ = ColumnJudge(c, rules.for_column(output, c))
        ev = e.column(c).slice(0, n).to_numpy(zero_copy_only=False)
        av = a.column(c).slice(0, n).to_numpy(zero_copy_only=False)
        where = (lambda col: (lambda i: f"row {i + 1}, column {col}"))(c)
        judge_.feed(ev, av, where, where)
        outcome.tallies.append(judge_.result())
    return outcome
