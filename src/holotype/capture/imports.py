"""Which top-level modules a project's code imports, read with `ast` from .py files and notebook cells."""

from __future__ import annotations

import ast
import json
from dataclasses import dataclass, field
from pathlib import Path

from holotype.errors import InputError
from holotype.safe_files import read_regular

MAX_SOURCE_BYTES = 64 << 20  # a source file or notebook larger than this is reported, not parsed


@dataclass
class ImportScan:
    modules: set[str] = field(default_factory=set)
    problems: list[tuple[str, str]] = field(default_factory=list)  # (relative path, what went wrong)


def _imports_in(tree: ast.AST) -> set[str]:
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            found.add(node.module.split(".")[0])
    return found


def _strip_magics(source: str) -> str:
    """Notebook cells may hold IPython magics and shell escapes; they are not Python."""
    lines = source.splitlines()
    if lines and lines[0].lstrip().startswith("%%"):
        return ""  # a cell magic: the whole cell is in another language or timed code we cannot parse
    kept = []
    for line in lines:
        stripped = line.lstrip()
        if stripped.startswith(("%", "!", "?")) or stripped.endswith("?"):
            kept.append("")  # keep numbering for error messages
        else:
            kept.append(line)
    return "\n".join(kept)


def notebook_code(raw: bytes) -> list[str]:
    """The code cells of an .ipynb document (nbformat 4 JSON), sources joined."""
    doc = json.loads(raw.decode("utf-8"))
    cells = doc.get("cells", []) if isinstance(doc, dict) else []
    out = []
    for cell in cells:
        if isinstance(cell, dict) and cell.get("cell_type") == "code":
            src = cell.get("source", "")
            out.append("".join(src) if isinstance(src, list) else str(src))
    return out


def scan_imports(files: list[tuple[str, Path]]) -> ImportScan:
    """Parse each (relative name, path); a file that fails to parse is reported, never fatal."""
    scan = ImportScan()
    for rel, path in files:
        try:
            raw = read_regular(path, limit=MAX_SOURCE_BYTES)
        except InputError as exc:
            scan.problems.append((rel, exc.detail))
            continue
        if rel.endswith(".ipynb"):
            try:
                sources = [_strip_magics(cell) for cell in notebook_code(raw)]
            except (ValueError, UnicodeDecodeError) as exc:
                scan.problems.append((rel, f"not a readable notebook: {exc}"))
                continue
        else:
            sources = [raw.decode("utf-8", "replace")]
        for index, source in enumerate(sources):
            try:
                tree = ast.parse(source, filename=rel)
            except (SyntaxError, ValueError) as exc:
                where = f"code cell {index + 1}, " if rel.endswith(".ipynb") else ""
                line = getattr(exc, "lineno", None)
                scan.problems.append((rel, f"skipped imports: syntax error at {where}line {line}"))
                continue
            scan.modules.update(_imports_in(tree))
    return scan
