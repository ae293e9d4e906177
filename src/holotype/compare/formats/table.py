"""CSV and TSV outputs: columns matched by name, rows by position (streamed) or by key columns.

Parsing uses pandas' C tokenizer in chunks: it is correctly rounded (checked against Python's
float() in the tests), handles quoting and dialects, and keeps memory bounded by a chunk. A chunk holds
about CHUNK_CELLS cells whatever the width, so a table of 100,000 columns is read a few rows at a time;
a wide chunk is taken apart in one conversion and its numeric columns are judged as 2-D blocks.
"""

from __future__ import annotations

import csv
import io
import queue
import re
import threading
from collections.abc import Iterator
from typing import Any

import numpy as np

from holotype.compare.formats import register
from holotype.compare.judge import ColumnJudge, Where, feed_numeric_block, plan_columns
from holotype.compare.numbers import EXACT_INTEGERS
from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.errors import UnreadableOutput
from holotype.phrasing import listed
from holotype.tolerance import RuleBook

# rows per chunk of a narrow table: 20,000 rows of a 1,000,000 x 10 file compare in the same time as 50,000
# (alternating runs, medians 0.917 s and 0.916 s) with a peak 34 MB lower (176 MB against 210 MB)
CHUNK_ROWS = 20_000
# cells per chunk of a wide one: pandas spends ~20 us per column on each chunk, so fewer cells would
# slow a wide table down many times; 2,000,000 float cells are 16 MB
CHUNK_CELLS = 2_000_000
WIDE = 64  # columns from which a chunk is converted in one go and judged in blocks
BLOCK_CELLS = 250_000  # cells judged at once: a dozen scratch arrays of this size, not of the whole chunk
HEADER_LIMIT = 64 << 20  # bytes of the header line read to count the columns
AHEAD = 2  # chunks parsed ahead per file: memory holds at most this many more per file


_COMMA_DECIMAL = re.compile(r"\s*[+-]?\d+,\d+(?:[eE][+-]?\d+)?\s*")
_POINT_DECIMAL = re.compile(r"\s*[+-]?\d*\.\d+(?:[eE][+-]?\d+)?\s*")


def sniff_table(src: Source) -> tuple[str, str, str]:
    """(delimiter, quote character, decimal mark) from the first 64 KiB, read once: tab for .tsv, else
    sniffed; the decimal mark is ',' where a table not delimited by commas writes its numbers so ('1,5' in
    a semicolon-separated export) and none of them with a point. An empty table is refused."""
    head = src.head(65536).decode("utf-8-sig", "replace")
    if not head.strip():
        raise UnreadableOutput("empty table (no header row)", src.label)
    lines = head.splitlines()
    delimiter, quote = ",", '"'
    if src.name.lower().endswith((".tsv", ".tab")):
        delimiter = "\t"
    else:
        try:
            dialect = csv.Sniffer().sniff("\n".join(lines[:50]), delimiters=",\t;|")
            delimiter, quote = dialect.delimiter, dialect.quotechar or '"'
        except csv.Error:
            pass
    return delimiter, quote, _decimal_mark(lines[1:51], delimiter, quote)  # the rows below the header


def _decimal_mark(rows: list[str], delimiter: str, quote: str) -> str:
    if delimiter == ",":
        return "."
    comma = point = 0
    try:
        for row in csv.reader(rows, delimiter=delimiter, quotechar=quote):
            for cell in row:
                if _COMMA_DECIMAL.fullmatch(cell):
                    comma += 1
                elif _POINT_DECIMAL.fullmatch(cell):
                    point += 1
    except csv.Error:
        return "."
    return "," if comma and not point else "."


def column_count(src: Source, delimiter: str, quote: str) -> int:
    """How many columns the header row names (at least 1; what fits in HEADER_LIMIT bytes is counted)."""
    with src.open() as fh:
        line = fh.readline(HEADER_LIMIT).decode("utf-8-sig", "replace")
    try:
        fields = next(csv.reader(io.StringIO(line), delimiter=delimiter, quotechar=quote), [])
    except csv.Error:
        fields = line.split(delimiter)
    return max(1, len(fields))


def chunk_rows(columns: int) -> int:
    """Rows per chunk for a table this wide: CHUNK_ROWS, fewer where that would pass CHUNK_CELLS."""
    return max(1, min(CHUNK_ROWS, CHUNK_CELLS // columns))


def _reader(src: Source, delimiter: str, quote: str, chunk_rows: int | None, decimal: str = ".") -> Any:
    import pandas as pd

    try:
        return pd.read_csv(src.open(), sep=delimiter, quotechar=quote, decimal=decimal, keep_default_na=False,
                           na_values=[],
                           chunksize=chunk_rows, encoding="utf-8-sig", engine="c", low_memory=False,
                           skip_blank_lines=True)
    except (ValueError, UnicodeDecodeError) as exc:
        raise UnreadableOutput(f"not a readable table: {_first_line(exc)}", src.label) from None


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


def _chunks(src: Source, delimiter: str, quote: str, decimal: str = ".") -> Iterator[Any]:
    import pandas as pd

    reader = _reader(src, delimiter, quote, chunk_rows(column_count(src, delimiter, quote)), decimal)
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


class _Ahead:
    """Chunks of one file parsed on a thread of their own, at most `AHEAD` ahead of the judging (pandas'
    tokenizer runs without the GIL, so both files are parsed at once while chunks are judged)."""

    def __init__(self, chunks: Iterator[Any]) -> None:
        self.chunks = chunks
        self.queue: queue.Queue[tuple[bool, Any]] = queue.Queue(maxsize=AHEAD)
        self.stopped = threading.Event()
        self.thread = threading.Thread(target=self._run, name="holotype-csv", daemon=True)

    def __enter__(self) -> _Ahead:
        self.thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stopped.set()
        while self.thread.is_alive():  # let a parse blocked on a full queue see the stop
            try:
                self.queue.get_nowait()
            except queue.Empty:
                pass
            self.thread.join(timeout=0.05)
        close = getattr(self.chunks, "close", None)
        if close is not None:
            close()

    def _put(self, item: tuple[bool, Any]) -> bool:
        while not self.stopped.is_set():
            try:
                self.queue.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def _run(self) -> None:
        try:
            for chunk in self.chunks:
                if not self._put((True, chunk)):
                    return
            self._put((True, None))
        except BaseException as exc:  # noqa: BLE001 - handed to the judging thread, which raises it
            self._put((False, exc))

    def next(self) -> Any:
        """The next chunk, None at the end; what the parse raised is raised here."""
        ok, item = self.queue.get()
        if not ok:
            raise item
        if item is None:
            self.queue.put((True, None))  # stays at the end
        return item


def _row_where(offset: int, col: str) -> Any:
    return lambda i: f"row {offset + i + 1}, column {col}"


def compare_tables(output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
    """Compare two delimited tables with a header row."""
    outcome = Outcome()
    e_delim, e_quote, e_decimal = sniff_table(expected)
    a_delim, a_quote, a_decimal = sniff_table(actual)
    if rules.for_output(output).key:
        e_df = _read_whole(expected, e_delim, e_quote, e_decimal)
        a_df = _read_whole(actual, a_delim, a_quote, a_decimal)
        return compare_keyed_frames(output, e_df, a_df, rules, (expected.label, actual.label))
    judges: list[ColumnJudge] = []
    e_rows = a_rows = 0
    compared: list[str] = []
    e_at: list[int] = []
    a_at: list[int] = []
    with _Ahead(_chunks(expected, e_delim, e_quote, e_decimal)) as e_iter, \
            _Ahead(_chunks(actual, a_delim, a_quote, a_decimal)) as a_iter:
        first = True
        while True:
            e_chunk, a_chunk = e_iter.next(), a_iter.next()
            if e_chunk is None and a_chunk is None:
                break
            if first:
                head: Any = e_chunk if e_chunk is not None else a_chunk
                other: Any = a_chunk if a_chunk is not None else e_chunk
                e_names, a_names = [str(c) for c in head.columns], [str(c) for c in other.columns]
                compared = plan_columns(output, e_names, a_names, rules, outcome)
                judges = [ColumnJudge(c, rules.for_column(output, c)) for c in compared]
                e_first = {c: i for i, c in reversed(list(enumerate(e_names)))}
                a_first = {c: i for i, c in reversed(list(enumerate(a_names)))}
                e_at, a_at = [e_first[c] for c in compared], [a_first[c] for c in compared]
                first = False
            ne = 0 if e_chunk is None else len(e_chunk)
            na = 0 if a_chunk is None else len(a_chunk)
            n = min(ne, na)
            if n and compared:
                wheres = [_row_where(e_rows, c) for c in compared]
                if max(e_chunk.shape[1], a_chunk.shape[1]) >= WIDE:
                    _judge_wide(judges, wheres, _Apart(e_chunk, n), _Apart(a_chunk, n), e_at, a_at)
                else:
                    for judge_, where, ep, ap in zip(judges, wheres, e_at, a_at):
                        judge_.feed(e_chunk.iloc[:n, ep].to_numpy(), a_chunk.iloc[:n, ap].to_numpy(), where)
            e_rows += ne
            a_rows += na
    if e_rows != a_rows:
        outcome.problem("output.shape", f"{e_rows:,} rows recorded, {a_rows:,} found", e_rows, a_rows)
    outcome.tallies = [j.result() for j in judges]
    return outcome


class _Apart:
    """The first n rows of a wide chunk as one 2-D array (one conversion: pandas is slow column by column
    on 100,000 columns), and which of its columns pandas read as numbers."""

    def __init__(self, chunk: Any, n: int) -> None:
        self.chunk, self.n = chunk, n
        self.whole = chunk.to_numpy()[:n]  # numbers alone give a float or int array; text makes it objects
        if self.whole.dtype.kind in "fiu":  # every column numeric: no need to ask pandas column by column
            self.numeric = np.ones(self.whole.shape[1], dtype=bool)
        else:
            self.numeric = np.array([dt.kind in "fiu" for dt in chunk.dtypes], dtype=bool)

    def numbers(self, at: list[int]) -> np.ndarray:
        """Numeric columns as float64 (from objects too: a Python int or float converts as NumPy would)."""
        return np.ascontiguousarray(self.whole[:, at], dtype=np.float64)

    def read(self, at: int) -> np.ndarray:
        """One column exactly as pandas read it (integers as integers)."""
        values: np.ndarray = self.chunk.iloc[:self.n, at].to_numpy()
        return values

    def column(self, at: int) -> np.ndarray:
        """One column as the narrow path gives it: numbers as pandas read them (the 2-D conversion may have
        rounded integers to doubles), anything else as it came."""
        values: np.ndarray = self.read(at) if self.numeric[at] else self.whole[:, at]
        return values


def _judge_wide(judges: list[ColumnJudge], wheres: list[Where], e: _Apart, a: _Apart,
                e_at: list[int], a_at: list[int]) -> None:
    """One wide chunk: columns numeric on both sides judged in blocks of one tolerance, the rest one by one."""
    blocks: dict[Any, list[int]] = {}
    for k, (ep, ap) in enumerate(zip(e_at, a_at)):
        if e.numeric[ep] and a.numeric[ap]:
            blocks.setdefault(judges[k].tally.tolerance, []).append(k)
        else:
            judges[k].feed(e.column(ep), a.column(ap), wheres[k])
    step = max(1, BLOCK_CELLS // max(1, len(e.whole)))  # columns per block: the judge's scratch stays small
    for same in blocks.values():
        for start in range(0, len(same), step):
            ks = same[start:start + step]
            e_block, a_block = e.numbers([e_at[k] for k in ks]), a.numbers([a_at[k] for k in ks])
            # beyond 2**53 a double may stand for several integers: such columns are judged as read
            with np.errstate(invalid="ignore"):
                big = ((np.abs(e_block) >= EXACT_INTEGERS) | (np.abs(a_block) >= EXACT_INTEGERS)).any(axis=0)
            if big.any():
                for k in (ks[j] for j in np.flatnonzero(big).tolist()):
                    judges[k].feed(e.read(e_at[k]), a.read(a_at[k]), wheres[k])
                keep = np.flatnonzero(~big)
                ks, e_block, a_block = [ks[j] for j in keep.tolist()], e_block[:, keep], a_block[:, keep]
            if ks:
                feed_numeric_block([judges[k] for k in ks], e_block, a_block, [wheres[k] for k in ks])


def _read_whole(src: Source, delim: str, quote: str, decimal: str) -> Any:
    import pandas as pd

    try:
        return _reader(src, delim, quote, None, decimal)
    except pd.errors.ParserError as exc:
        raise UnreadableOutput(f"not a readable table: {_first_line(exc)}", src.label) from None


def _key_text(key: tuple[str, ...]) -> str:
    return key[0] if len(key) == 1 else "(" + ", ".join(key) + ")"


def compare_keyed_frames(output: str, e_df: Any, a_df: Any, rules: RuleBook, labels: tuple[str, str]) -> Outcome:
    """Rows matched by the key columns of the output's rule (whole tables in memory: pandas DataFrames)."""
    outcome = Outcome()
    keys = list(rules.for_output(output).key)
    for label, df in zip(labels, (e_df, a_df)):
        absent = [k for k in keys if k not in df.columns]
        if absent:
            raise UnreadableOutput(f"key column(s) {', '.join(absent)} not in the table", label)
    compared = plan_columns(output, [str(c) for c in e_df.columns], [str(c) for c in a_df.columns], rules, outcome)

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
            outcome.problem("output.shape", f"duplicate key(s) in the {label} table: "
                            + listed(_key_text(k) for k in dups))
    a_index = {k: i for i, k in reversed(list(enumerate(a_keys)))}
    e_set = set(e_keys)
    missing = [k for k in dict.fromkeys(e_keys) if k not in a_index]
    extra = [k for k in dict.fromkeys(a_keys) if k not in e_set]
    if missing:
        outcome.problem("output.shape", f"{len(missing)} row(s) missing: " + listed(_key_text(k) for k in missing),
                        len(missing), None)
    if extra:
        outcome.problem("output.shape", f"{len(extra)} extra row(s): " + listed(_key_text(k) for k in extra),
                        None, len(extra))
    e_pos: list[int] = []
    a_pos: list[int] = []
    seen_e: set[tuple[str, ...]] = set()
    for i, k in enumerate(e_keys):
        if k in a_index and k not in seen_e:
            e_pos.append(i)
            a_pos.append(a_index[k])
            seen_e.add(k)
    matched_keys = [e_keys[i] for i in e_pos]
    for c in compared:
        judge_ = ColumnJudge(c, rules.for_column(output, c))
        ev = e_df[c].to_numpy()[e_pos]
        av = a_df[c].to_numpy()[a_pos]
        judge_.feed(ev, av, (lambda col: (lambda i: f"key {_key_text(matched_keys[i])}, column {col}"))(c))
        outcome.tallies.append(judge_.result())
    return outcome


class TableFormat:
    name: str = "csv"
    suffixes: tuple[str, ...] = (".csv", ".tsv", ".tab")
    honours: frozenset[str] = frozenset({"key", "ignore", "sign_free"})

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        return compare_tables(output, expected, actual, rules)


register(TableFormat())
