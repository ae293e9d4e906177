"""Parquet outputs (optional extra `holotype[parquet]`): read with pyarrow, compared as tables.

Rows are matched by position, or by the rule's key columns exactly as for CSV.
"""

from __future__ import annotations

import io
from typing import Any

from holotype.compare.formats import register
from holotype.compare.formats.table import compare_keyed_frames
from holotype.compare.judge import ColumnJudge, plan_columns
from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.errors import UnreadableOutput
from holotype.tolerance import RuleBook


def _read(src: Source) -> Any:
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        raise UnreadableOutput("comparing Parquet needs the optional extra: pip install 'holotype[parquet]'",
                               src.label) from None
    try:
        return pq.read_table(io.BytesIO(src.read_bytes()))
    except (pa.ArrowException, OSError, ValueError) as exc:  # pyarrow's own error types for damaged files
        raise UnreadableOutput(f"not a readable Parquet file: {str(exc).splitlines()[0]}", src.label) from None


def compare_parquet(output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
    e, a = _read(expected), _read(actual)
    if rules.for_output(output).key:
        return compare_keyed_frames(output, e.to_pandas(), a.to_pandas(), rules, (expected.label, actual.label))
    outcome = Outcome()
    compared = plan_columns(output, list(e.column_names), list(a.column_names), rules, outcome)
    n = min(e.num_rows, a.num_rows)
    if e.num_rows != a.num_rows:
        outcome.problem("output.shape", f"{e.num_rows:,} rows recorded, {a.num_rows:,} found", e.num_rows, a.num_rows)
    for c in compared:
        judge_ = ColumnJudge(c, rules.for_column(output, c))
        ev = e.column(c).slice(0, n).to_numpy(zero_copy_only=False)
        av = a.column(c).slice(0, n).to_numpy(zero_copy_only=False)
        judge_.feed(ev, av, (lambda col: (lambda i: f"row {i + 1}, column {col}"))(c))
        outcome.tallies.append(judge_.result())
    return outcome


class ParquetFormat:
    name: str = "parquet"
    suffixes: tuple[str, ...] = (".parquet", ".pq")
    honours: frozenset[str] = frozenset({"key", "ignore", "sign_free"})

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        return compare_parquet(output, expected, actual, rules)


register(ParquetFormat())
