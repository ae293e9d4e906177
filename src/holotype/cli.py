"""The command line: parse options, call one function, render, choose the exit code. Nothing else.

Heavy modules (NumPy, packaging, the commands) are imported inside the commands so that
`holotype --version` and `--help` stay fast.
"""

from __future__ import annotations

import os
import sys
from enum import Enum
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Callable, NoReturn, Optional

import typer

from holotype import __version__

if TYPE_CHECKING:
    from rich.console import Console

    from holotype.findings import Report

app = typer.Typer(
    name="holotype",
    help="Record exactly what a data analysis ran on, and prove later that it still gives the same numbers.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)


class Format(str, Enum):
    text = "text"
    json = "json"
    junit = "junit"
    markdown = "markdown"


class ExportFormat(str, Enum):
    requirements = "requirements"
    pylock = "pylock"


class ReportFormat(str, Enum):
    markdown = "markdown"
    html = "html"


ProjectOpt = Annotated[Path, typer.Option("--project", "-C", help="The project folder.", show_default=False)]
FormatOpt = Annotated[Format, typer.Option("--format", help="How to report findings.")]
OutputOpt = Annotated[Optional[Path], typer.Option("--output", help="Also write the report to FILE.")]
QuietOpt = Annotated[bool, typer.Option("--quiet", help="No progress, no table; the exit code tells.")]
NoColorOpt = Annotated[bool, typer.Option("--no-color", help="No colour (also: NO_COLOR=1).")]
PythonOpt = Annotated[Optional[str], typer.Option("--python", help="The analysis interpreter to inspect.")]


def _version(value: bool) -> None:
    if value:
        print(f"holotype {__version__}")
        raise typer.Exit(0)


@app.callback()
def _root(
    version: Annotated[bool, typer.Option("--version", callback=_version, is_eager=True,
                                          help="Print the version and exit.")] = False,
) -> None:
    """holotype keeps the reference specimen of an analysis and checks later runs against it."""


class Session:
    """The options every command shares, and the consoles they imply."""

    def __init__(self, project: Path, fmt: Format = Format.text, output: Path | None = None, quiet: bool = False,
                 no_color: bool = False) -> None:
        self.project = project
        self.fmt = fmt
        self.output = output
        self.quiet = quiet
        self.no_color = no_color or bool(os.environ.get("NO_COLOR"))
        self._console: Console | None = None
        self._err: Console | None = None

    @property
    def console(self) -> Console:
        if self._console is None:
            from rich.console import Console

            self._console = Console(no_color=self.no_color, highlight=False, soft_wrap=False)
        return self._console

    @property
    def err(self) -> Console:
        if self._err is None:
            from rich.console import Console

            self._err = Console(stderr=True, no_color=self.no_color, highlight=False)
        return self._err

    @property
    def interactive(self) -> bool:
        return not self.quiet and self.fmt == Format.text and self.console.is_terminal

    def say(self, message: str) -> None:
        if not self.quiet:
            self.err.print(message, markup=False)

    def emit(self, report: Report) -> NoReturn:
        """Render the report (and --output), then exit 0 or 1."""
        from holotype.render import formats

        if self.output is not None:
            fmt = self.fmt if self.fmt != Format.text else _format_from_suffix(self.output)
            formats.write_report(self.output, report, fmt.value)
            if fmt != Format.text and not self.quiet:
                formats.print_text(self.console, report)
        if self.output is None or self.fmt == Format.text:
            if self.fmt == Format.text:
                if not self.quiet:
                    formats.print_text(self.console, report)
            else:
                sys.stdout.write(formats.render(report, self.fmt.value))
                sys.stdout.flush()
        raise typer.Exit(0 if report.ok else 1)


def _format_from_suffix(path: Path) -> Format:
    return {".json": Format.json, ".xml": Format.junit, ".md": Format.markdown}.get(path.suffix.lower(), Format.text)


def guarded(action: Callable[[], Any], session: Session | None = None) -> Any:
    """Run a command body; HolotypeError (and anything unexpected) becomes one line on stderr and exit 2."""
    from holotype.errors import HolotypeError

    try:
        return action()
    except typer.Exit:
        raise
    except HolotypeError as exc:
        _fail(str(exc))
    except KeyboardInterrupt:
        _fail("interrupted")
    except Exception as exc:  # never a traceback for users; HOLOTYPE_DEBUG=1 shows it
        if os.environ.get("HOLOTYPE_DEBUG"):
            raise
        _fail(f"internal error: {type(exc).__name__}: {exc} (set HOLOTYPE_DEBUG=1 for details)")


def _fail(message: str) -> NoReturn:
    sys.stderr.write(f"holotype: {message}\n")
    raise typer.Exit(2)


def _print_warnings(session: Session) -> None:
    from holotype.config import find_config_source, load_config

    try:
        config = load_config(session.project, required=False)
    except Exception:
        return
    for warning in config.warnings:
        session.say(f"warning: {warning}")


# ----------------------------------------------------------------------------- commands


@app.command()
def start(project: ProjectOpt = Path("."), quiet: QuietOpt = False, no_color: NoColorOpt = False) -> None:
    """Look at the folder and write a starter holotype.toml (never overwrites)."""
    session = Session(project, quiet=quiet, no_color=no_color)

    def body() -> None:
        from holotype.commands.start import start_project

        path = start_project(project)
        session.say(f"wrote {path}; edit it, then run 'holotype record'")

    guarded(body)


@app.command()
def record(
    project: ProjectOpt = Path("."),
    no_run: Annotated[bool, typer.Option("--no-run", help="Record the environment, data and code only.")] = False,
    python: PythonOpt = None,
    fmt: FormatOpt = Format.text,
    output: OutputOpt = None,
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """Capture interpreter, packages, data, code and seeds; run the analyses; write holotype.lock."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.record import record_project
        from holotype.render.progress import AnalysisPanel, HashBar

        _print_warnings(session)
        panel = AnalysisPanel(session.err) if session.interactive else None
        try:
            outcome = record_project(project, run=not no_run, python=python,
                                     hash_progress=HashBar(session.err) if session.interactive else None,
                                     run_progress=panel)
        finally:
            if panel is not None:
                panel.close()
        session.emit(outcome.report)

    guarded(body)


@app.command()
def check(
    project: ProjectOpt = Path("."),
    full: Annotated[bool, typer.Option("--full", help="Hash every file again, ignoring the digest cache.")] = False,
    strict: Annotated[bool, typer.Option("--strict", help="Treat warnings as failures.")] = False,
    python: PythonOpt = None,
    fmt: FormatOpt = Format.text,
    output: OutputOpt = None,
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """Compare the project as it is now with holotype.lock, running nothing."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.check import check_project
        from holotype.render.progress import HashBar

        _print_warnings(session)
        report = check_project(project, strict=strict, full=full, python=python,
                               progress=HashBar(session.err) if session.interactive else None)
        session.emit(report)

    guarded(body)


@app.command()
def rerun(
    names: Annotated[Optional[list[str]], typer.Argument(help="Analyses to run (default: all).",
                                                        show_default=False)] = None,
    twice: Annotated[bool, typer.Option("--twice", help="Run each twice and flag outputs that differ.")] = False,
    dry_run: Annotated[bool, typer.Option("--dry-run", help="Print what would run, with which environment.")] = False,
    python: PythonOpt = None,
    project: ProjectOpt = Path("."),
    fmt: FormatOpt = Format.text,
    output: OutputOpt = None,
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """Run the analyses with their seeds and compare every output with its baseline."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.rerun import rerun_project
        from holotype.render.progress import AnalysisPanel

        _print_warnings(session)
        panel = AnalysisPanel(session.err) if session.interactive and not dry_run else None
        try:
            report = rerun_project(project, names, twice=twice, python=python, dry_run=dry_run, progress=panel)
        finally:
            if panel is not None:
                panel.close()
        session.emit(report)

    guarded(body)


@app.command()
def accept(
    names: Annotated[Optional[list[str]], typer.Argument(help="Analyses to accept (default: all).",
                                                        show_default=False)] = None,
    reason: Annotated[Optional[str], typer.Option("--reason", help="Why the new results replace the old.")] = None,
    project: ProjectOpt = Path("."),
    fmt: FormatOpt = Format.text,
    output: OutputOpt = None,
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """Take the current outputs as the new baselines, and log why."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.accept import accept_outputs

        session.emit(accept_outputs(project, names, reason or ""))

    guarded(body)


@app.command()
def compare(
    expected: Annotated[Path, typer.Argument(help="The recorded file or folder.", show_default=False)],
    actual: Annotated[Path, typer.Argument(help="The new file or folder.", show_default=False)],
    atol: Annotated[Optional[float], typer.Option("--atol", help="Absolute tolerance.")] = None,
    rtol: Annotated[Optional[float], typer.Option("--rtol", help="Tolerance relative to the expected value.")] = None,
    ulps: Annotated[Optional[int], typer.Option("--ulps", help="Distance in binary64 steps.")] = None,
    digits: Annotated[Optional[float], typer.Option("--digits", help="Correct significant digits (LRE).")] = None,
    key: Annotated[Optional[list[str]], typer.Option("--key", help="Match rows by this column (repeatable).")] = None,
    sign_free: Annotated[Optional[list[str]], typer.Option("--sign-free",
                                                            help="Columns that may flip sign as a whole.")] = None,
    ignore: Annotated[Optional[list[str]], typer.Option("--ignore", help="Skip these columns (globs).")] = None,
    project: ProjectOpt = Path("."),
    fmt: FormatOpt = Format.text,
    output: OutputOpt = None,
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """Compare two result files or two folders directly, within tolerances."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.compare_files import compare_inputs, rulebook_from_flags

        rules = rulebook_from_flags(atol, rtol, ulps, digits, key, sign_free, ignore)
        session.emit(compare_inputs(project / expected, project / actual, rules))

    guarded(body)


@app.command()
def diff(
    a: Annotated[Optional[Path], typer.Argument(help="The earlier lockfile.", show_default=False)] = None,
    b: Annotated[Optional[Path], typer.Argument(help="The later lockfile.", show_default=False)] = None,
    rev: Annotated[Optional[str], typer.Option("--rev", help="Compare the lock committed at this git revision "
                                                              "with the working copy's.")] = None,
    project: ProjectOpt = Path("."),
    fmt: FormatOpt = Format.text,
    output: OutputOpt = None,
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """What differs between two lockfiles."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.diff import diff_files, diff_revision
        from holotype.errors import HolotypeError

        if rev is not None:
            if a is not None or b is not None:
                raise HolotypeError("give either two lockfiles or --rev REV, not both")
            session.emit(diff_revision(project, rev))
        if a is None or b is None:
            raise HolotypeError("diff needs two lockfiles (A.lock B.lock) or --rev REV")
        session.emit(diff_files(project / a, project / b, project))

    guarded(body)


@app.command()
def rebuild(
    folder: Annotated[Path, typer.Argument(help="Where to create the environment (new or empty).",
                                           show_default=False)],
    python: Annotated[Optional[str], typer.Option("--python", help="Interpreter to build it with.")] = None,
    find_links: Annotated[Optional[list[str]], typer.Option("--find-links", help="Passed to the installer.")] = None,
    index_url: Annotated[Optional[str], typer.Option("--index-url", help="Passed to the installer.")] = None,
    no_index: Annotated[bool, typer.Option("--no-index", help="Passed to the installer.")] = False,
    project: ProjectOpt = Path("."),
    fmt: FormatOpt = Format.text,
    output: OutputOpt = None,
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """Build a fresh virtual environment in FOLDER that matches the lock, then check it."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.rebuild import InstallerOptions, rebuild_environment

        options = InstallerOptions(list(find_links or []), index_url, no_index)
        session.say(f"building {folder} from holotype.lock …")
        session.emit(rebuild_environment(project, folder, python=python, installer=options))

    guarded(body)


@app.command()
def export(
    fmt: Annotated[ExportFormat, typer.Option("--format", help="requirements or pylock.")] = ExportFormat.requirements,
    output: OutputOpt = None,
    find_links: Annotated[Optional[list[Path]], typer.Option(
        "--find-links", help="Folders with the locked wheels (pylock needs their hashes).")] = None,
    project: ProjectOpt = Path("."),
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """Write the locked packages as requirements.txt pins or a PEP 751 pylock.toml."""
    session = Session(project, quiet=quiet, no_color=no_color)

    def body() -> None:
        from holotype.commands.export import export_lock

        _write_or_print(session, export_lock(project, fmt.value, list(find_links or [])), output)

    guarded(body)


@app.command()
def report(
    fmt: Annotated[ReportFormat, typer.Option("--format", help="markdown or html.")] = ReportFormat.markdown,
    output: OutputOpt = None,
    project: ProjectOpt = Path("."),
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """A methods and provenance appendix for a thesis or paper."""
    session = Session(project, quiet=quiet, no_color=no_color)

    def body() -> None:
        from holotype.commands.report import build_report

        _write_or_print(session, build_report(project, fmt.value), output)

    guarded(body)


def _write_or_print(session: Session, text: str, output: Path | None) -> None:
    if output is None:
        sys.stdout.write(text)
        return
    from holotype.atomic import write_atomic

    write_atomic(output, text)
    session.say(f"wrote {output}")


@app.command()
def demo(
    folder: Annotated[Path, typer.Argument(help="Where to write the demo project (new or empty).")] = Path(
        "holotype-demo"),
    quiet: QuietOpt = False,
    no_color: NoColorOpt = False,
) -> None:
    """The whole cycle on a bundled, invented lake survey."""
    session = Session(Path("."), quiet=quiet, no_color=no_color)

    def body() -> None:
        from holotype.demo.tour import run_demo

        console = session.console
        if quiet:
            from rich.console import Console

            console = Console(file=open(os.devnull, "w"))
        run_demo(folder, console)

    guarded(body)


def main() -> None:
    """Console-script entry point."""
    app()
