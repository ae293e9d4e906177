"""CSV and TSV outputs: columns matched by name, rows by position (streamed) or by key columns.

Parsing uses pandas' C tokenizer in chunks: it is correctly rounded (checked against Python's
float() in the tests), handles quoting and dialects, and keeps memory bounded by a chunk.
"""

from __future__ import annotations

import csv
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from fnmatch import fnmatchcase
from typing import Any

import numpy as np

from holotype.compare.cells import MISSING, NUMBER, TEXT, column_arrays
from holotype.compare.numbers import judge
from holotype.compare.source import Source, UnreadableOutput
from holotype.compare.tally import Tally
from holotype.compare.tolerance import RuleBook, Tolerance

CHUNK_ROWS = 50_000
SHOWN = 5


@dataclass
class TableOutcome:
    tallies: list[Tally] = field(default_factory=list)
    problems: list[tuple[str, str, Any, Any]] = field(default_factory=list)  # (kind, message, expected, actual)
    notes: list[str] = field(default_factory=list)


def sniff_dialect(src: Source) -> tuple[str, str]:
    """(delimiter, quote character): tab for .tsv, otherwise sniffed from the first 64 KiB."""
    if src.name.lower().endswith((".tsv", ".tab")):
        return "\t", '"'
    head = src.head(65536).decode("utf-8-sig", "replace")
    lines = head.splitlines()
    sample = "\n".join(lines[:50])
    try:
        dialect = csv.Sniffer().sniff(sample, delimiters=",\t;|")
        return dialect.delimiter, dialect.quotechar or '"'
    except csv.Error:
        return ",", '"'


def _reader(src: Source, delimiter: str, quote: str, chunk_rows: int | None) -> Any:
    import pandas as pd

    try:
        return pd.read_csv(src.open(), sep=delimiter, quotechar=quote, keep_default_na=False, na_values=[],
                           chunksize=chunk_rows, encoding="utf-8-sig", engine="c", low_memory=False,
                           skip_blank_lines=True)
    except (ValueError, UnicodeDecodeError) as exc:
        raise UnreadableOutput(f"not a readable table: {_first_line(exc)}", src.label) from None


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


def _chunks(src: Source, delimiter: str, quote: str) -> Iterator[Any]:
    import pandas as pd

    reader = _reader(src, delimiter, quote, CHUNK_ROWS)
    try:
        while True:
            try:
                yield next(reader)
            except StopIteration:
                return
            except (pd.errors.ParserError, ValueError, UnicodeDecodeError) as exc:
                raise UnreadableOutput(f"not a readable table: {_first_line(exc)}", src.label) from None
    finally:
        reader.close()


class ColumnJudge:
    """Compares one column chunk by chunk; keeps a flipped tally too when the column is sign-free."""

    def __init__(self, name: str, tol: Tolerance) -> None:
        self.tally = Tally(name, tol)
        self.flipped = Tally(name, tol) if tol.sign_free else None

    def feed(self, expected: Any, actual: Any, where: Any, exact_where: Any) -> None:
        e_num, e_kind, e_obj = column_arrays(expected)
        a_num, a_kind, a_obj = column_arrays(actual)
        if e_kind is None and a_kind is None:
            self.numeric(e_num, a_num, where)
            return
        n = e_num.shape[0]
        ek = e_kind if e_kind is not None else np.zeros(n, dtype=np.int8)
        ak = a_kind if a_kind is not None else np.zeros(n, dtype=np.int8)
        both_num = (ek == NUMBER) & (ak == NUMBER)
        idx = np.where(both_num)[0]
        if idx.size:
            self.numeric(e_num[idx], a_num[idx], lambda i: where(int(idx[i])))
        for i in np.where(~both_num)[0].tolist():
            if ek[i] == MISSING and ak[i] == MISSING:
                equal = True
            elif ek[i] == TEXT and ak[i] == TEXT:
                equal = str(e_obj[i]) == str(a_obj[i])  # type: ignore[index]
            else:
                equal = False
            e_val = "(missing)" if ek[i] == MISSING else (e_obj[i] if e_obj is not None else e_num[i])
            a_val = "(missing)" if ak[i] == MISSING else (a_obj[i] if a_obj is not None else a_num[i])
            self.exact(equal, exact_where(i), e_val, a_val)

    def exact(self, equal: bool, where: str, expected: Any, actual: Any) -> None:
        """One cell compared exactly (text, missing, or kinds that differ); sign plays no part."""
        self.tally.add_exact(equal, where, expected, actual)
        if self.flipped is not None:
            self.flipped.add_exact(equal, where, expected, actual)

    def numeric(self, e: np.ndarray, a: np.ndarray, where: Any) -> None:
        tol = self.tally.tolerance
        self.tally.add_numeric(e, a, judge(e, a, tol), where)
        if self.flipped is not None:
            neg = -a
            self.flipped.add_numeric(e, neg, judge(e, neg, tol), where)

    def result(self) -> Tally:
        """The orientation that fits: a sign-free column may be flipped as a whole, never value by value."""
        if self.flipped is not None and self.flipped.mismatches < self.tally.mismatches:
            self.flipped.sign_flipped = True
            return self.flipped
        return self.tally


def plan_columns(output: str, e_cols: list[str], a_cols: list[str], rules: RuleBook,
                  outcome: TableOutcome) -> tuple[list[str], Tolerance]:
    whole = rules.for_output(output)
    shared = [c for c in e_cols if c in a_cols]
    only_e = [c for c in e_cols if c not in a_cols]
    only_a = [c for c in a_cols if c not in e_cols]
    if only_e:
        outcome.problems.append(("output.shape", f"column(s) missing: {', '.join(only_e[:SHOWN])}"
                                 + (f" and {len(only_e) - SHOWN} more" if len(only_e) > SHOWN else ""), only_e, None))
    if only_a:
        outcome.problems.append(("output.shape", f"new column(s): {', '.join(only_a[:SHOWN])}"
                                 + (f" and {len(only_a) - SHOWN} more" if len(only_a) > SHOWN else ""), None, only_a))
    if [c for c in a_cols if c in shared] != shared:
        outcome.notes.append("columns are in a different order (matched by name)")
    if len(set(e_cols)) != len(e_cols) or len(set(a_cols)) != len(a_cols):
        outcome.problems.append(("output.shape", "duplicate column names; only the first of each is compared",
                                 None, None))
    ignored = whole.ignore
    compared = [c for c in shared if not any(fnmatchcase(c, g) for g in ignored) and c not in whole.key]
    return compared, whole


def _row_where(offset: int, col: str) -> Any:
    return lambda i: f"row {offset + i + 1}, column {col}"


def compare_tables(output: str, expected: Source, actual: Source, rules: RuleBook) -> TableOutcome:
    """Compare two delimited tables with a header row."""
    outcome = TableOutcome()
    e_delim, e_quote = sniff_dialect(expected)
    a_delim, a_quote = sniff_dialect(actual)
    for src in (expected, actual):
        if not src.head(65536).decode("utf-8-sig", "replace").strip():
            raise UnreadableOutput("empty table (no header row)", src.label)
    whole = rules.for_output(output)
    if whole.key:
        return _compare_keyed(output, expected, actual, rules, outcome, (e_delim, e_quote), (a_delim, a_quote))
    judges: dict[str, ColumnJudge] = {}
    e_rows = a_rows = 0
    compared: list[str] = []
    e_iter = _chunks(expected, e_delim, e_quote)
    a_iter = _chunks(actual, a_delim, a_quote)
    with ThreadPoolExecutor(max_workers=2, thread_name_prefix="holotype-csv") as pool:
        first = True
        while True:
            fe = pool.submit(next, e_iter, None)
            fa = pool.submit(next, a_iter, None)
            e_chunk, a_chunk = fe.result(), fa.result()
            if e_chunk is None and a_chunk is None:
                break
            if first:
                head: Any = e_chunk if e_chunk is not None else a_chunk
                other: Any = a_chunk if a_chunk is not None else e_chunk
                e_cols = [str(c) for c in head.columns]
                a_cols = [str(c) for c in other.columns]
                compared, _ = plan_columns(output, e_cols, a_cols, rules, outcome)
                judges = {c: ColumnJudge(c, rules.for_column(output, c)) for c in compared}
                first = False
            ne = 0 if e_chunk is None else len(e_chunk)
            na = 0 if a_chunk is None else len(a_chunk)
            n = min(ne, na)
            if n:
                for c in compared:
                    ev = e_chunk[c].to_numpy()[:n]  # type: ignore[index]
                    av = a_chunk[c].to_numpy()[:n]  # type: ignore[index]
                    judges[c].feed(ev, av, _row_where(e_rows, c), _row_where(e_rows, c))
            e_rows += ne
            a_rows += na
    if e_rows != a_rows:
        outcome.problems.append(("output.shape", f"{e_rows:,} rows recorded, {a_rows:,} found", e_rows, a_rows))
    outcome.tallies = [judges[c].result() for c in compared]
    return outcome


def _read_whole(src: Source, delim: str, quote: str) -> Any:
    import pandas as pd

    try:
        return _reader(src, delim, quote, None)
    except pd.errors.ParserError as exc:
        raise UnreadableOutput(f"not a readable table: {_first_line(exc)}", src.label) from None


def _compare_keyed(output: str, expected: Source, actual: Source, rules: RuleBook, outcome: TableOutcome,
                   e_dialect: tuple[str, str], a_dialect: tuple[str, str]) -> TableOutcome:
    """Rows matched by key columns (the whole table is held in memory for this)."""
    e_df = _read_whole(expected, *e_dialect)
    a_df = _read_whole(actual, *a_dialect)
    whole = rules.for_output(output)
    keys = list(whole.key)
    for label, df in ((expected.label, e_df), (actual.label, a_df)):
        absent = [k for k in keys if k not in df.columns]
        if absent:
            raise UnreadableOutput(f"key column(s) {', '.join(absent)} not in the table", label)
    e_cols = [str(c) for c in e_df.columns]
    a_cols = [str(c) for c in a_df.columns]
    compared, _ = plan_columns(output, e_cols, a_cols, rules, outcome)

    def key_tuples(df: Any) -> list[tuple[str, ...]]:
        return list(zip(*(df[k].astype(str).tolist() for k in keys)))

    e_keys, a_keys = key_tuples(e_df), key_tuples(a_df)
    for label, ks in (("recorded", e_keys), ("found", a_keys)):
        seen: set[tuple[str, ...]] = set()
        dups = []
        for k in ks:
            if k in seen:
                dups.append(k)
            seen.add(k)
        if dups:
            outcome.problems.append(("output.shape", f"duplicate key(s) in the {label} table: "
                                     + ", ".join(_key_text(k) for k in dups[:SHOWN])
                                     + (f" and {len(dups) - SHOWN} more" if len(dups) > SHOWN else ""), None, None))
    a_index = {k: i for i, k in reversed(list(enumerate(a_keys)))}
    e_set = set(e_keys)
    missing = [k for k in dict.fromkeys(e_keys) if k not in a_index]
    extra = [k for k in dict.fromkeys(a_keys) if k not in e_set]
    if missing:
        outcome.problems.append(("output.shape", f"{len(missing)} row(s) missing: "
                                 + ", ".join(_key_text(k) for k in missing[:SHOWN])
                                 + (f" and {len(missing) - SHOWN} more" if len(missing) > SHOWN else ""),
                                 len(missing), None))
    if extra:
        outcome.problems.append(("output.shape", f"{len(extra)} extra row(s): "
                                 + ", ".join(_key_text(k) for k in extra[:SHOWN])
                                 + (f" and {len(extra) - SHOWN} more" if len(extra) > SHOWN else ""), None, len(extra)))
    e_pos: list[int] = []
    a_pos: list[int] = []
    seen_e: set[tuple[str, ...]] = set()
    for i, k in enumerate(e_keys):
        if k in a_index and k not in seen_e:
            e_pos.append(i)
            a_pos.append(a_index[k])
            seen_e.add(k)
    matched_keys = [e_keys[i] for i in e_pos]
    tallies = []
    for c in compared:
        judge_ = ColumnJudge(c, rules.for_column(output, c))
        ev = e_df[c].to_numpy()[e_pos]
        av = a_df[c].to_numpy()[a_pos]
        where = (lambda col: (lambda i: f"key {_key_text(matched_keys[i])}, column {col}"))(c)
        judge_.feed(ev, av, where, where)
        tallies.append(judge_.result())
    outcome.tallies = tallies
    return outcome


def _key_text(key: tuple[str, ...]) -> str:
    return key[0] if len(key) == 1 else "(" + ", ".join(key) + ")"

