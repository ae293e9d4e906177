"""`holotype start`: look at the folder and write a starter holotype.toml."""

from __future__ import annotations

import ast
import os
import re
from pathlib import Path

from holotype.atomic import write_atomic
from holotype.capture.environment import VENV_INTERPRETERS
from holotype.capture.walk import SKIP_FOLDERS
from holotype.config import CONFIG_NAME
from holotype.errors import HolotypeError
from holotype.seeds import draw_seed

DATA_FOLDER_NAMES = ("data", "raw", "raw_data", "input", "inputs", "dataset", "datasets")


def _toml_str(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def starter_config(root: Path, seed: int) -> str:
    """The text of a starter holotype.toml for the folder at `root`."""
    lines = ["# holotype configuration: what to record and how closely re-runs must match.",
             "# Reference: docs/configuration.md in holotype's documentation.", ""]
    for rel in VENV_INTERPRETERS:
        if (root / rel).exists():
            lines.append(f"python = {_toml_str(rel)}  # the analysis environment")
            break
    else:
        lines.append('# python = ".venv/bin/python"   # the analysis environment (default: the running Python)')
    data = [name for name in DATA_FOLDER_NAMES if (root / name).is_dir()]
    if data:
        lines.append("data = [" + ", ".join(_toml_str(d) for d in data) + "]")
    else:
        lines.append('data = []  # add your data files or folders, e.g. ["data"]')
    lines += [
        '# code = ["analysis"]  # default: every .py and .ipynb outside data and virtual environments',
        'exclude = ["**/*.tmp"]',
        f"seed = {seed}",
        "threads = 1  # pin BLAS/OpenMP threads in analyses for bit-stable sums",
        "",
        "[tolerance]",
        "rtol = 1e-9",
        "atol = 1e-12",
        "",
        "# [[rules]]",
        '# match = "results/pca_*.csv:PC*"',
        "# sign_free = true",
        "# rtol = 1e-6",
    ]
    scripts = [p for p in _project_files(root, ".py") if _has_main_body(p)]
    notebooks = _project_files(root, ".ipynb")
    for script in scripts[:20]:
        rel = script.relative_to(root).as_posix()
        found = written_paths(script)
        lines += ["", f"# [analyses.{_name(script)}]", f'# command = "python {rel}"']
        if found:
            lines.append("# outputs = [" + ", ".join(_toml_str(f) for f in found) + "]   # found in its write calls")
        else:
            lines.append('# outputs = ["results/..."]   # the files this script writes')
    for notebook in notebooks[:20]:
        rel = notebook.relative_to(root).as_posix()
        lines += ["", f"# [analyses.{_name(notebook)}]", f"# notebook = {_toml_str(rel)}   # executed headless "
                  "(nbclient in the analysis environment)",
                  f'# outputs = ["results/executed/{notebook.name}"]   # the executed copy, compared cell by cell']
    if not scripts and not notebooks:
        lines += ["", "# [analyses.summary]", '# command = "python analysis/summary.py"',
                  '# outputs = ["results/summary.csv"]']
    return "\n".join(lines) + "\n"


def _name(path: Path) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", path.stem) or "analysis"


def _project_files(root: Path, suffix: str, limit: int = 2000) -> list[Path]:
    """Files with `suffix` anywhere in the project, outside virtual environments, caches and data folders."""
    out: list[Path] = []
    stack = [root]
    while stack and len(out) < limit:
        folder = stack.pop()
        try:
            entries = sorted(os.scandir(folder), key=lambda e: e.name)
        except OSError:
            continue
        for entry in entries:
            if entry.is_dir(follow_symlinks=False):
                if entry.name in SKIP_FOLDERS or entry.name.startswith(".") or (
                        folder == root and entry.name in DATA_FOLDER_NAMES) or \
                        os.path.exists(os.path.join(entry.path, "pyvenv.cfg")):
                    continue
                stack.append(Path(entry.path))
            elif entry.is_file(follow_symlinks=False) and entry.name.endswith(suffix):
                out.append(Path(entry.path))
    return sorted(out)


def _has_main_body(script: Path) -> bool:
    """Whether a script does something when run: a `__main__` block or top-level statements beyond
    imports, definitions, constants and its docstring (a helper module is not an analysis)."""
    tree = _parse(script)
    if tree is None:
        return False
    for node in tree.body:
        if isinstance(node, (ast.Import, ast.ImportFrom, ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            continue
        if isinstance(node, (ast.Assign, ast.AnnAssign)) and not any(isinstance(n, ast.Call)
                                                                     for n in ast.walk(node)):
            continue
        if isinstance(node, ast.Expr) and isinstance(node.value, ast.Constant):
            continue  # a docstring
        return True
    return False


def _parse(script: Path) -> ast.Module | None:
    try:
        return ast.parse(script.read_bytes())
    except (OSError, SyntaxError, ValueError):
        return None


WRITERS = frozenset({"to_csv", "to_json", "to_latex", "to_parquet", "to_excel", "to_markdown", "to_html",
                     "to_string", "savefig", "save", "savez", "savez_compressed", "savetxt", "write_text",
                     "write_bytes", "to_file", "to_netcdf"})


def written_paths(script: Path) -> list[str]:
    """Relative output paths a script names as string literals in its write calls (`open(p, "w")`,
    `df.to_csv(p)`, `fig.savefig(p)`, `np.save(p, …)`, `Path(p).write_text(…)`): the easy cases only."""
    tree = _parse(script)
    if tree is None:
        return []
    found: list[str] = []
    for node in ast.walk(tree):
        if not isinstance(node, ast.Call):
            continue
        target: ast.expr | None = None
        func = node.func
        if isinstance(func, ast.Name) and func.id == "open" and len(node.args) >= 2 and \
                isinstance(node.args[1], ast.Constant) and isinstance(node.args[1].value, str) and \
                any(c in node.args[1].value for c in "wax"):
            target = node.args[0]
        elif isinstance(func, ast.Attribute) and func.attr in WRITERS:
            if func.attr in ("write_text", "write_bytes") and isinstance(func.value, ast.Call) and func.value.args:
                target = func.value.args[0]
            elif node.args:
                target = node.args[0]
        if isinstance(target, ast.Constant) and isinstance(target.value, str):
            path = target.value
            if path and not path.startswith(("/", "~")) and ".." not in path.split("/") and "." in path:
                if path not in found:
                    found.append(path)
    return found[:20]


def start_project(root: Path) -> Path:
    """Write holotype.toml in `root`; refuse if one exists."""
    target = Path(root) / CONFIG_NAME
    if not Path(root).is_dir():
        raise HolotypeError("project folder does not exist", root)
    if target.exists():
        raise HolotypeError("already exists; holotype start never overwrites it", target)
    write_atomic(target, starter_config(Path(root), draw_seed()))
    return target
