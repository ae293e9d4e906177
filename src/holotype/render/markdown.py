"""Findings as a Markdown table for a CI job summary or a pull-request comment."""

from __future__ import annotations

from holotype.findings import Judgement
from holotype.findings.policy import SEVERITY_ORDER
from holotype.findings.summary import CAVEAT, summary_line

ICON = {"fail": "❌ fail", "warn": "⚠️ warn", "info": "ℹ️ info"}


def cell(text: object) -> str:
    """One table cell: pipes escaped, line breaks as <br>, so user text cannot break the table."""
    value = "" if text is None else str(text)
    return value.replace("\\", "\\\\").replace("|", "\\|").replace("\r", "").replace("\n", "<br>")


def render_markdown(report: Judgement) -> str:
    summary = summary_line(report.command, report.counts(), verdict=report.verdict)
    mark = "" if not report.verdict else "✅ " if report.ok else "❌ "
    lines = [f"### holotype {report.command}", "", f"**{mark}{cell(summary)}**", ""]
    rows = sorted(report.findings, key=lambda f: (SEVERITY_ORDER[f.severity], f.area, f.subject))
    if rows:
        lines += ["| | area | subject | finding |", "|---|---|---|---|"]
        for f in rows:
            text = f.message + (f"\nwhat may have moved it ({CAVEAT}): " + "; ".join(
                f"{i}. {c}" for i, c in enumerate(f.candidates, start=1)) if f.candidates else "")
            lines.append(f"| {ICON[f.severity]} | {cell(f.area)} | `{cell(f.subject).replace('`', 'ʼ')}` | "
                         f"{cell(text)} |")
    for note in report.notes:
        lines += ["", f"_{cell(note)}_"]
    return "\n".join(lines) + "\n"
