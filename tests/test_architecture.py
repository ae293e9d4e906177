"""The shape of the code: imports run one way, start-up stays light, the public API is small."""

from __future__ import annotations

import ast
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parent.parent / "src" / "holotype"

# Higher layers may import lower ones; within a layer only inside the same package. render is apart:
# it may import only the plain data it lays out.
LAYERS = {
    "holotype": 90,  # the Python API (its imports are inside functions)
    "holotype.__main__": 85, "holotype.entry": 80, "holotype.cli": 70, "holotype.demo": 65,
    "holotype.commands": 60,
    "holotype.verify": 50, "holotype.environments": 50,
    "holotype.capture": 40, "holotype.compare": 40, "holotype.run": 40,
    "holotype.config": 30, "holotype.config_edit": 30, "holotype.lockfile": 30, "holotype.store": 30,
    "holotype.standards": 30,
    "holotype.appendix": 25, "holotype.manifests": 25,
    "holotype.records": 20, "holotype.findings": 20, "holotype.tolerance": 20, "holotype.clock": 20,
    "holotype.atomic": 20, "holotype.safe_files": 25, "holotype.search": 0,
    "holotype.errors": 10,
    "holotype.schema": 0, "holotype.phrasing": 0, "holotype.redaction": 0, "holotype.threads": 0, "holotype.seeds": 0, "holotype.__version__": 0,
}
RENDER_MAY_IMPORT = ("holotype.render", "holotype.findings", "holotype.records", "holotype.appendix",
                     "holotype.phrasing", "holotype.errors", "holotype.__version__")


def module_name(path: Path) -> str:
    parts = ["holotype", *path.relative_to(SRC).with_suffix("").parts]
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def group_of(module: str) -> str:
    best = ""
    for name in (*LAYERS, "holotype.render"):
        if (module == name or module.startswith(name + ".")) and len(name) > len(best):
            best = name
    assert best, f"{module} is in no layer: add it to LAYERS"
    return best


def imports_of(path: Path, module: str) -> set[str]:
    """Every holotype module `path` imports, at module level or inside functions."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.startswith("holotype")}
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1] + ([base] if base else []))
            if not base.startswith("holotype"):
                continue
            for alias in node.names:
                candidate = f"{base}.{alias.name}"
                found.add(candidate if (SRC.parent / (candidate.replace(".", "/") + ".py")).exists()
                          or (SRC.parent / candidate.replace(".", "/")).is_dir() else base)
    return {"holotype.__version__" if m == "holotype" else m for m in found} - {module}


def graph() -> dict[str, set[str]]:
    out = {}
    for path in SRC.rglob("*.py"):
        if "demo/scripts" in path.as_posix() or "run/hook" in path.as_posix() or path.name.endswith("probe.py"):
            continue  # these run inside the analysis interpreter, standard library only
        module = module_name(path)
        out[module] = imports_of(path, module)
    return out


def test_imports_run_one_way() -> None:
    bad = []
    for module, targets in sorted(graph().items()):
        mine = group_of(module)
        for target in sorted(targets):
            theirs = group_of(target)
            if mine == "holotype.render":
                if not target.startswith(RENDER_MAY_IMPORT):
                    bad.append(f"{module} -> {target} (render depends only on findings and plain records)")
                continue
            if theirs == "holotype.render":
                if LAYERS[mine] < LAYERS["holotype.commands"]:
                    bad.append(f"{module} -> {target} (only commands and the CLI render)")
                continue
            if mine == "holotype.commands" and theirs == "holotype.commands" and target != "holotype.commands":
                bad.append(f"{module} -> {target} (no command imports another command)")
            elif LAYERS[theirs] > LAYERS[mine] or (LAYERS[theirs] == LAYERS[mine] and theirs != mine):
                bad.append(f"{module} -> {target} ({mine} may not import {theirs})")
    assert not bad, "\n".join(bad)


def test_no_import_cycles() -> None:
    edges = graph()
    state: dict[str, int] = {}
    cycles: list[str] = []

    def visit(node: str, path: list[str]) -> None:
        state[node] = 1
        for nxt in sorted(edges.get(node, ())):
            if state.get(nxt) == 1:
                cycles.append(" -> ".join(path[path.index(nxt):] + [nxt]) if nxt in path else f"{node} -> {nxt}")
            elif nxt in edges and state.get(nxt) is None:
                visit(nxt, path + [nxt])
        state[node] = 2

    for node in sorted(edges):
        if state.get(node) is None:
            visit(node, [node])
    assert not cycles, "\n".join(cycles)


def test_the_contract_test_can_fail(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the checker itself must see an edge that breaks the rules (render importing a command); planted in a
    # copy of the package, never in the source tree (analyses running meanwhile digest holotype's own files)
    copy = tmp_path / "src" / "holotype"
    shutil.copytree(SRC, copy, ignore=shutil.ignore_patterns("__pycache__"))
    monkeypatch.setattr(sys.modules[__name__], "SRC", copy)
    (copy / "render" / "_planted_for_test.py").write_text("from holotype.commands.report import build_report\n")
    with pytest.raises(AssertionError, match="render depends only on findings"):
        test_imports_run_one_way()


def _loaded_modules(*args: str) -> set[str]:
    code = ("import sys, runpy, json\nsys.argv = ['holotype', *json.loads(sys.argv[1])]\n"
            "try:\n    runpy.run_module('holotype.entry', run_name='__main__')\nexcept SystemExit:\n    pass\n"
            "print(json.dumps(sorted(sys.modules)), file=sys.stderr)")
    proc = subprocess.run([sys.executable, "-c", code, json.dumps(list(args))], capture_output=True, text=True,
                          env={**os.environ, "NO_COLOR": "1"})
    return set(json.loads(proc.stderr.strip().splitlines()[-1]))


@pytest.mark.parametrize("args", [("--version",), ("--help",), ("check", "--help")])
def test_start_up_loads_no_heavy_modules(args: tuple[str, ...]) -> None:
    loaded = _loaded_modules(*args)
    heavy = {"numpy", "pandas", "rich", "packaging", "pyarrow", "tomli_w", "holotype.commands", "holotype.capture",
             "holotype.compare", "holotype.run"}
    assert not {m for m in loaded if m.split(".")[0] in heavy or m in heavy or
                any(m.startswith(h + ".") for h in heavy if "." in h)}
    if args == ("--version",):
        assert "click" not in loaded  # answered before the command framework loads
