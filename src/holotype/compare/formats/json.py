"""JSON outputs: every leaf compared at its path (`tests.welch.p_value`, `rows[3].mean`).

Values are grouped into columns by wildcarding list indices (`rows[*].mean`); in a list of
lists the last index is kept (`loadings[*][2]`), so a matrix column is one unit, as in a table.
"""

from __future__ import annotations

import json
import math
import re
from decimal import Decimal
from fnmatch import fnmatchcase
from typing import Any

import numpy as np

from holotype.compare.formats import register
from holotype.compare.judge import ColumnJudge
from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.compare.tally import Tally
from holotype.errors import UnreadableOutput
from holotype.phrasing import listed
from holotype.tolerance import RuleBook

_PLAIN_KEY = re.compile(r"^[A-Za-z_][A-Za-z0-9_-]*$")


def _no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in pairs:
        if k in out:
            raise ValueError(f"duplicate key '{k}'")
        out[k] = v
    return out


def _json_float(text: str) -> float | Decimal:
    """A JSON number with a fraction or exponent: a float, unless binary64 cannot hold it ('1e400' would be
    infinity, and so would '1e401'): then the number as written, compared exactly."""
    value = float(text)
    return Decimal(text) if math.isinf(value) else value


def load_json(src: Source) -> Any:
    """Parse strictly: UTF-8, no duplicate keys (NaN and Infinity literals, as Python writes them, are allowed)."""
    raw = src.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise UnreadableOutput(f"not UTF-8 text (byte {exc.start})", src.label) from None
    try:
        return json.loads(text, object_pairs_hook=_no_duplicates, parse_float=_json_float)
    except json.JSONDecodeError as exc:
        raise UnreadableOutput(f"invalid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}",
                               src.label) from None
    except (ValueError, RecursionError) as exc:
        raise UnreadableOutput(f"invalid JSON: {exc}", src.label) from None


def _key_part(key: str) -> str:
    return f".{key}" if _PLAIN_KEY.match(key) else "[" + json.dumps(key) + "]"


def flatten(doc: Any) -> dict[str, tuple[Any, str]]:
    """path -> (leaf value, column path). Empty containers are leaves too, so their disappearance shows."""
    out: dict[str, tuple[Any, str]] = {}
    stack: list[tuple[str, str, Any]] = [("", "", doc)]
    while stack:
        path, column, value = stack.pop()
        if isinstance(value, dict) and value:
            for k in reversed(list(value)):
                stack.append((path + _key_part(k), column + _key_part(k), value[k]))
        elif isinstance(value, list) and value:
            for i in reversed(range(len(value))):
                stack.append((path + f"[{i}]", column + "[*]", value[i]))
        else:
            out[path.lstrip(".") or "$"] = (value, column.lstrip(".") or "$")
    return out


def _columns_for(doc: Any) -> dict[str, tuple[Any, str]]:
    flat = flatten(doc)
    fixed: dict[str, tuple[Any, str]] = {}
    for path, (value, column) in flat.items():
        # keep the final index where the value sits directly in a row of a matrix
        m = re.search(r"\[(\d+)\]\[(\d+)\]$", path)
        if m:
            column = column[: -len("[*]")] + f"[{m.group(2)}]"
        fixed[path] = (value, column)
    return fixed


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def compare_json(output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
    outcome = Outcome()
    e = _columns_for(load_json(expected))
    a = _columns_for(load_json(actual))
    whole = rules.for_output(output)
    missing = [p for p in e if p not in a]
    extra = [p for p in a if p not in e]
    if missing:
        outcome.problem("output.shape", f"{len(missing)} value(s) missing: " + listed(missing), len(missing), None)
    if extra:
        outcome.problem("output.shape", f"{len(extra)} new value(s): " + listed(extra), None, len(extra))
    groups: dict[str, list[str]] = {}
    for path, (_value, column) in e.items():
        if path in a and not any(fnmatchcase(path, g) for g in whole.ignore):
            groups.setdefault(column, []).append(path)
    tallies: list[Tally] = []
    for column, paths in groups.items():
        tol = rules.for_column(output, paths[0])
        judge_ = ColumnJudge(column, tol)
        numeric = [p for p in paths if _is_number(e[p][0]) and _is_number(a[p][0])]
        if numeric:
            # as parsed (objects): integers beyond 2**53 are judged exactly, not as their rounded doubles
            ev = np.array([e[p][0] for p in numeric], dtype=object)
            av = np.array([a[p][0] for p in numeric], dtype=object)
            judge_.numeric(ev, av, numeric.__getitem__)
        for p in paths:
            if _is_number(e[p][0]) and _is_number(a[p][0]):
                continue
            if isinstance(e[p][0], str) and isinstance(a[p][0], str):
                judge_.text(e[p][0], a[p][0], p)
                continue
            equal = type(e[p][0]) is type(a[p][0]) and e[p][0] == a[p][0]
            judge_.exact(equal, p, e[p][0], a[p][0])
        tallies.append(judge_.result())
    outcome.tallies = tallies
    return outcome


class JsonFormat:
    name: str = "json"
    suffixes: tuple[str, ...] = (".json",)
    honours: frozenset[str] = frozenset({"ignore", "sign_free"})

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        return compare_json(output, expected, actual, rules)


register(JsonFormat())
