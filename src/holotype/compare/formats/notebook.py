"""Executed Jupyter notebooks (nbformat 4 JSON), compared cell by cell.

Each code cell's outputs are paired in order: stream text, `text/plain`, `text/html`, `text/markdown` and
`text/latex` as text (numbers with the tolerance), `image/png` and `image/jpeg` as images, errors by their
name and message. Execution counts, timing and other metadata, and widget state are ignored. Every finding
names the cell: its index and the first line of its source.
"""

from __future__ import annotations

import base64
import binascii
import json
from typing import Any

from holotype.compare.formats import register
from holotype.compare.formats.image import compare_images
from holotype.compare.formats.text import TEXT_HONOURS, compare_lines
from holotype.compare.outcome import Outcome, Problem
from holotype.compare.source import Source
from holotype.errors import UnreadableOutput
from holotype.tolerance import RuleBook

TEXT_TYPES = ("text/plain", "text/html", "text/markdown", "text/latex")
IMAGE_TYPES = ("image/png", "image/jpeg")


def _load(src: Source) -> list[dict[str, Any]]:
    try:
        doc = json.loads(src.read_bytes().decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError) as exc:
        raise UnreadableOutput(f"not a notebook (invalid JSON: {str(exc)[:120]})", src.label) from None
    if not isinstance(doc, dict) or not isinstance(doc.get("cells"), list):
        raise UnreadableOutput("not a notebook (no list of cells)", src.label)
    return [c for c in doc["cells"] if isinstance(c, dict)]


def _text(value: Any) -> str:
    return "".join(value) if isinstance(value, list) else str(value or "")


def _label(index: int, cell: dict[str, Any]) -> str:
    first = next((line.strip() for line in _text(cell.get("source")).splitlines() if line.strip()), "")
    return f"cell {index} ({first[:50]})" if first else f"cell {index}"


def _parts(cell: dict[str, Any]) -> list[tuple[str, Any]]:
    """(what, content) for each output of a code cell, in order: text pieces and images."""
    out: list[tuple[str, Any]] = []
    for item in cell.get("outputs") or ():
        if not isinstance(item, dict):
            continue
        kind = item.get("output_type")
        if kind == "stream":
            out.append((f"{item.get('name', 'stream')} output", _text(item.get("text"))))
        elif kind == "error":
            out.append(("error", f"{item.get('ename', '')}: {item.get('evalue', '')}"))
        elif kind in ("execute_result", "display_data"):
            data = item.get("data") or {}
            for mime in IMAGE_TYPES:
                if mime in data:
                    out.append((mime, _text(data[mime])))
            for mime in TEXT_TYPES:
                if mime in data:
                    out.append((mime, _text(data[mime])))
    return out


def compare_notebooks(output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
    outcome = Outcome()
    tol = rules.for_output(output)
    e_cells, a_cells = _load(expected), _load(actual)
    if len(e_cells) != len(a_cells):
        outcome.problem("output.shape", f"{len(e_cells)} cells recorded, {len(a_cells)} found", len(e_cells),
                        len(a_cells))
    for index, (ec, ac) in enumerate(zip(e_cells, a_cells), start=1):
        label = _label(index, ec)
        if _text(ec.get("source")) != _text(ac.get("source")):
            outcome.problem("output.mismatch", f"{label}: its source changed", None, _label(index, ac))
            continue
        if ec.get("cell_type") != "code":
            continue
        e_parts, a_parts = _parts(ec), _parts(ac)
        if [w for w, _ in e_parts] != [w for w, _ in a_parts]:
            outcome.problem("output.shape", f"{label}: outputs {[w for w, _ in e_parts]} recorded, "
                            f"{[w for w, _ in a_parts]} found")
            continue
        for (what, e_value), (_, a_value) in zip(e_parts, a_parts):
            if e_value == a_value:
                if what not in IMAGE_TYPES:
                    compare_lines(e_value.splitlines(), a_value.splitlines(), tol, outcome,
                                  where_prefix=f"{label}, {what}, ", name=label)
                continue
            if what in IMAGE_TYPES:
                _image(output, label, e_value, a_value, rules, outcome)
            else:
                compare_lines(e_value.splitlines(), a_value.splitlines(), tol, outcome,
                              where_prefix=f"{label}, {what}, ", name=label)
    if not outcome.tallies and not outcome.problems:
        outcome.problem("output.match", f"{len(e_cells)} cells compared: their outputs match")
    return outcome


def _image(output: str, label: str, e_value: str, a_value: str, rules: RuleBook, outcome: Outcome) -> None:
    try:
        e_bytes, a_bytes = base64.b64decode(e_value), base64.b64decode(a_value)
    except (binascii.Error, ValueError):
        outcome.problem("output.mismatch", f"{label}: an image output is not valid base64")
        return
    inner = compare_images(output, Source.from_bytes(e_bytes, output, f"{label} image"),
                           Source.from_bytes(a_bytes, output, f"{label} image"), rules)
    outcome.problems += [Problem(p.kind, f"{label}: {p.message}", p.expected, p.actual) for p in inner.problems
                         if p.kind != "output.match"]
    if inner.picture is not None and outcome.picture is None:
        outcome.picture = inner.picture


class NotebookFormat:
    name: str = "notebook"
    suffixes: tuple[str, ...] = (".ipynb",)
    honours: frozenset[str] = TEXT_HONOURS | {"channel_delta", "pixel_share"}

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        return compare_notebooks(output, expected, actual, rules)


register(NotebookFormat())
