"""Render: findings into text for people (rich) or machines (JSON, JUnit XML, Markdown), and the appendix.

Two registries, each format a module: `FINDINGS` drives the CLI's `--format` choices and the
format inferred from an `--output` suffix; `APPENDIX` drives `report --format`. Entries name
their module, so choosing a format imports only that renderer (and `--help` imports none).
"""

from __future__ import annotations

import importlib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any


@dataclass(frozen=True)
class RendererEntry:
    module: str
    function: str
    suffixes: tuple[str, ...] = ()

    def load(self) -> Callable[..., str]:
        fn: Callable[..., str] = getattr(importlib.import_module(f"holotype.render.{self.module}"), self.function)
        return fn


FINDINGS: dict[str, RendererEntry] = {
    "text": RendererEntry("terminal", "render_text", (".txt",)),
    "json": RendererEntry("json_format", "render_json", (".json",)),
    "junit": RendererEntry("junit", "render_junit", (".xml",)),
    "markdown": RendererEntry("markdown", "render_markdown", (".md",)),
}
APPENDIX: dict[str, RendererEntry] = {
    "markdown": RendererEntry("methods_markdown", "render_methods_markdown", (".md",)),
    "html": RendererEntry("methods_html", "render_methods_html", (".html", ".htm")),
}


def format_for(path: Path, registry: dict[str, RendererEntry], fallback: str) -> str:
    """The format an output file's suffix implies, else `fallback`."""
    suffix = Path(path).suffix.lower()
    for name, entry in registry.items():
        if suffix in entry.suffixes:
            return name
    return fallback


def render_findings(report: Any, fmt: str) -> str:
    """The report as text in `fmt` (a key of FINDINGS)."""
    return FINDINGS[fmt].load()(report)


def appendix_renderer(fmt: str) -> Callable[..., str]:
    return APPENDIX[fmt].load()
