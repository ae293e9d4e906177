"""Choose a renderer by format name, and write reports to files atomically."""

from __future__ import annotations

import io
from pathlib import Path

from rich.console import Console

from holotype.atomic import write_atomic
from holotype.findings import Report


def render(report: Report, fmt: str) -> str:
    """The report as text in `fmt` (json, junit, markdown or text)."""
    if fmt == "json":
        from holotype.render.json_format import render_json

        return render_json(report)
    if fmt == "junit":
        from holotype.render.junit import render_junit

        return render_junit(report)
    if fmt == "markdown":
        from holotype.render.markdown import render_markdown

        return render_markdown(report)
    console = Console(record=True, width=120, no_color=True, file=io.StringIO())
    print_text(console, report)
    return console.export_text()


def print_text(console: Console, report: Report) -> None:
    from holotype.render.terminal import print_report

    print_report(console, report)


def write_report(path: Path, report: Report, fmt: str) -> None:
    write_atomic(path, render(report, fmt))
