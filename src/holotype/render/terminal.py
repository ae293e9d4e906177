"""Findings as a rich table for people: failures first, then warnings, then information."""

from __future__ import annotations

from rich.console import Console, Group, RenderableType
from rich.table import Table
from rich.text import Text

from holotype.findings import Finding, Judgement
from holotype.findings.policy import SEVERITY_ORDER
from holotype.findings.summary import CAVEAT, summary_line, verdict_word
from holotype.phrasing import one_line

SEVERITY_STYLE = {"fail": "bold red", "warn": "yellow", "info": "dim"}
SEVERITY_LABEL = {"fail": "FAIL", "warn": "warn", "info": "info"}


class FindingsTable:
    """One table of findings; output findings carry their error figures in the message column."""

    def __init__(self, report: Judgement, *, show_info: bool = True, wrap: bool = True) -> None:
        self.report = report
        self.show_info = show_info
        self.wrap = wrap  # outside a terminal nothing is folded, so paths stay whole in logs

    def rows(self) -> list[Finding]:
        rows = [f for f in self.report.findings if self.show_info or f.severity != "info"]
        return sorted(rows, key=lambda f: (SEVERITY_ORDER[f.severity], f.area, f.subject))

    def __rich__(self) -> RenderableType:
        rows = self.rows()
        parts: list[RenderableType] = []
        if rows and not self.wrap:
            parts += [self.line(f) for f in rows]
        elif rows:
            table = Table(show_edge=False, header_style="bold", pad_edge=False, expand=False)
            table.add_column("", no_wrap=True)
            table.add_column("area", no_wrap=True)
            table.add_column("subject", overflow="fold", max_width=48)
            table.add_column("what holotype found", overflow="fold")
            for f in rows:
                message = Text(f.message)
                if f.stats is not None and f.stats.error_decades and f.severity != "info":
                    message.append("\n" + decade_line(f), style="dim")
                if f.candidates:
                    message.append("\n" + candidates_line(f), style="dim")
                table.add_row(Text(SEVERITY_LABEL[f.severity], style=SEVERITY_STYLE[f.severity]), f.area,
                              Text(f.subject), message)
            parts.append(table)
        for f in rows:
            if f.severity == "fail" and f.stats is not None and f.stats.columns:
                detail = ColumnBreakdown(f)
                if detail.failing:
                    parts.append(detail)
        for note in self.report.notes:
            parts.append(Text(note, style="dim"))
        parts.append(self.verdict())
        return Group(*parts)

    @staticmethod
    def line(f: Finding) -> Text:
        """One finding on one line (outside a terminal: nothing folded, so logs keep paths whole)."""
        text = Text.assemble((f"{SEVERITY_LABEL[f.severity]:<4}", SEVERITY_STYLE[f.severity]),
                             f"  {f.area:<11} {one_line(f.subject)}: {one_line(f.message)}")
        if f.stats is not None and f.stats.error_decades and f.severity != "info":
            text.append("\n" + " " * 6 + decade_line(f), style="dim")
        if f.candidates:
            text.append("\n" + " " * 6 + one_line(candidates_line(f)), style="dim")
        return text

    def verdict(self) -> Text:
        line = summary_line(self.report.command, self.report.counts(), verdict=self.report.verdict)
        if not self.report.verdict:
            return Text(line, style="bold")
        word = verdict_word(self.report.command, self.report.ok)
        return Text.assemble((word, "bold green" if self.report.ok else "bold red"), line[len(word):])


def _num(x: object) -> str:
    if isinstance(x, float):
        return f"{x:.3g}"
    return str(x)


class ColumnBreakdown:
    """For a failing output: each column (or JSON path, or array) outside tolerance, worst first."""

    SHOWN = 8

    def __init__(self, finding: Finding) -> None:
        assert finding.stats is not None
        self.finding = finding
        columns = [c for c in finding.stats.columns if c.get("mismatches")]
        self.failing = sorted(columns, key=lambda c: -float(c["max_rel_err"]) if c["max_rel_err"] != "inf"
                              else -float("inf"))

    def __rich__(self) -> RenderableType:
        table = Table(title=f"{self.finding.subject}: where the values moved", title_justify="left",
                      title_style="bold", show_edge=False, header_style="dim", pad_edge=False, expand=False)
        shown = self.failing[: self.SHOWN]
        per_column = len({c["tolerance"] for c in shown}) > 1  # otherwise the finding above already says it
        headers = [("column", "left"), ("outside", "right"), ("max abs err", "right"), ("max rel err", "right"),
                   ("digits", "right"), ("worst", "left")] + ([("tolerance", "left")] if per_column else [])
        for name, justify in headers:
            table.add_column(name, justify=justify, overflow="fold")  # type: ignore[arg-type]
        for c in shown:
            cells = [str(c["name"]), f"{c['mismatches']:,}/{c['compared']:,}", _num(c["max_abs_err"]),
                     _num(c["max_rel_err"]), f"{c['min_lre']:.1f}", str(c["worst"] or "")]
            table.add_row(*cells, *([str(c["tolerance"])] if per_column else []))
        if len(self.failing) > self.SHOWN:
            table.caption = f"and {len(self.failing) - self.SHOWN} more column(s) outside tolerance"
        return table


def candidates_line(f: Finding, shown: int = 5) -> str:
    """'what may have moved it (a ranking of candidates, not proof): 1. … 2. …'"""
    items = [f"{i}. {c}" for i, c in enumerate(f.candidates[:shown], start=1)]
    more = f" (and {len(f.candidates) - shown} more)" if len(f.candidates) > shown else ""
    return f"what may have moved it ({CAVEAT}): " + "; ".join(items) + more


def decade_line(f: Finding) -> str:
    """How the errors spread over decades of relative error, e.g. 'exact 990 · 1e-16 8 · 1e-3 2'."""
    assert f.stats is not None
    items = list(f.stats.error_decades.items())
    return "relative errors: " + " · ".join(f"{k} {v}" for k, v in items) + f" (tolerance {f.stats.tolerance})"


def print_report(console: Console, report: Judgement, *, show_info: bool = True) -> None:
    console.print(FindingsTable(report, show_info=show_info, wrap=console.is_terminal))


def render_text(report: Judgement) -> str:
    """The human table as plain text (for --output FILE.txt): wide, so paths are never cut."""
    import io

    console = Console(record=True, width=100_000, no_color=True, file=io.StringIO())
    print_report(console, report)
    return console.export_text()
