"""The command line: parse options, call one function, render, choose the exit code. Nothing else.

Built on click. Heavy modules (NumPy, packaging, rich tables, the commands) are imported inside
the commands so that `holotype --help` stays fast.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any, NoReturn, TypeVar

import click

from holotype import __version__

if TYPE_CHECKING:
    from rich.console import Console

    from holotype.findings import Report

F = TypeVar("F", bound=Callable[..., Any])
FINDING_FORMATS = ("text", "json", "junit", "markdown")
CONTEXT = {"help_option_names": ["--help", "-h"], "max_content_width": 100}


class Session:
    """The options every command shares, and the consoles they imply."""

    def __init__(self, project: Path, fmt: str = "text", output: Path | None = None, quiet: bool = False,
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

            self._console = Console(file=sys.stdout, no_color=self.no_color, highlight=False)
        return self._console

    @property
    def err(self) -> Console:
        if self._err is None:
            from rich.console import Console

            self._err = Console(file=sys.stderr, no_color=self.no_color, highlight=False)
        return self._err

    @property
    def interactive(self) -> bool:
        return not self.quiet and self.fmt == "text" and self.err.is_terminal

    def say(self, message: str) -> None:
        if not self.quiet:
            self.err.print(message, markup=False)

    def emit(self, report: Report) -> NoReturn:
        """Render the report (and --output), then exit 0 or 1."""
        from holotype.render import formats

        for warning in report.warnings:
            self.say(f"warning: {warning}")
        if self.output is not None:
            fmt = self.fmt if self.fmt != "text" else _format_from_suffix(self.output)
            formats.write_report(self.output, report, fmt)
            if not self.quiet:
                formats.print_text(self.console, report)
        elif self.fmt == "text":
            if not self.quiet:
                formats.print_text(self.console, report)
        else:
            sys.stdout.write(formats.render(report, self.fmt))
            sys.stdout.flush()
        sys.exit(0 if report.ok else 1)


def _format_from_suffix(path: Path) -> str:
    return {".json": "json", ".xml": "junit", ".md": "markdown"}.get(path.suffix.lower(), "text")


def run_guarded(action: Callable[[], Any]) -> Any:
    """Run a command body; HolotypeError (and anything unexpected) becomes one line on stderr and exit 2."""
    from holotype.errors import HolotypeError

    try:
        return action()
    except HolotypeError as exc:
        _fail(str(exc))
    except KeyboardInterrupt:
        _fail("interrupted")
    except (SystemExit, click.exceptions.Exit, click.ClickException):
        raise
    except Exception as exc:  # never a traceback for users; HOLOTYPE_DEBUG=1 shows it
        if os.environ.get("HOLOTYPE_DEBUG"):
            raise
        _fail(f"internal error: {type(exc).__name__}: {exc} (set HOLOTYPE_DEBUG=1 for details)")


def _fail(message: str) -> NoReturn:
    from holotype.errors import one_line

    sys.stderr.write(f"holotype: {one_line(message)}\n")
    sys.stderr.flush()
    sys.exit(2)


# ----------------------------------------------------------------------------- shared options


def _project(f: F) -> F:
    return click.option("--project", "-C", "project", type=PATH, default=Path("."),
                        show_default=False, help="The project folder (default: the current folder).")(f)


def _quiet_color(f: F) -> F:
    f = click.option("--no-color", is_flag=True, help="No colour (also: NO_COLOR=1).")(f)
    return click.option("--quiet", is_flag=True, help="No progress, no table; the exit code tells.")(f)


def _findings_output(f: F) -> F:
    f = click.option("--output", type=PATH, default=None,
                     help="Also write the report to FILE (atomically).")(f)
    return click.option("--format", "fmt", type=click.Choice(FINDING_FORMATS), default="text", show_default=True,
                        help="How to report findings.")(f)


def _python(f: F) -> F:
    return click.option("--python", default=None, help="The analysis interpreter to inspect.")(f)


def common(*, findings: bool = True, python: bool = False) -> Callable[[F], F]:
    """The options interface.md gives every command (and --python where it applies)."""

    def decorate(f: F) -> F:
        f = _quiet_color(f)
        if findings:
            f = _findings_output(f)
        if python:
            f = _python(f)
        return _project(f)

    return decorate


class PathParam(click.ParamType):  # type: ignore[type-arg]
    """A path argument; a NUL byte is a usage error rather than a crash inside the OS call."""

    name = "path"

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Path:
        text = os.fspath(value)
        if "\x00" in text:
            self.fail(f"{text!r} contains a NUL byte", param, ctx)
        return Path(text)


PATH = PathParam()


class HolotypeGroup(click.Group):
    """Usage errors as one line on stderr with exit 2, like every other error holotype reports."""

    def main(self, args: Any = None, prog_name: str | None = None, complete_var: str | None = None,
             standalone_mode: bool = True, **extra: Any) -> Any:
        try:
            code = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        except click.UsageError as exc:
            where = f" (see 'holotype {exc.ctx.command.name} --help')" if exc.ctx and exc.ctx.parent else \
                " (see 'holotype --help')"
            _fail(exc.format_message() + where)
        except click.Abort:
            _fail("interrupted")
        except click.ClickException as exc:
            _fail(exc.format_message())
        sys.exit(code if isinstance(code, int) else 0)


@click.group(cls=HolotypeGroup, context_settings=CONTEXT)
@click.version_option(__version__, "--version", prog_name="holotype", message="%(prog)s %(version)s")
def app() -> None:
    """Record exactly what a data analysis ran on, and prove later that it still gives the same numbers."""


# ----------------------------------------------------------------------------- commands


@app.command()
@common(findings=False)
def start(project: Path, quiet: bool, no_color: bool) -> None:
    """Look at the folder and write a starter holotype.toml (never overwrites)."""
    session = Session(project, quiet=quiet, no_color=no_color)

    def body() -> None:
        from holotype.commands.start import start_project

        path = start_project(project)
        session.say(f"wrote {path}; edit it, then run 'holotype record'")

    run_guarded(body)


@app.command()
@click.option("--no-run", is_flag=True, help="Record the environment, data and code only.")
@common(python=True)
def record(project: Path, no_run: bool, python: str | None, fmt: str, output: Path | None, quiet: bool,
           no_color: bool) -> None:
    """Capture interpreter, packages, data, code and seeds; run the analyses; write holotype.lock."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.record import record_project
        from holotype.render.progress import AnalysisPanel, HashBar

        panel = AnalysisPanel(session.err) if session.interactive else None
        try:
            outcome = record_project(project, run=not no_run, python=python,
                                     hash_progress=HashBar(session.err) if session.interactive else None,
                                     run_progress=panel)
        finally:
            if panel is not None:
                panel.close()
        session.emit(outcome.report)

    run_guarded(body)


@app.command()
@click.option("--full", is_flag=True, help="Hash every file again (no digest cache) and verify every baseline.")
@click.option("--strict", is_flag=True, help="Treat warnings as failures.")
@common(python=True)
def check(project: Path, full: bool, strict: bool, python: str | None, fmt: str, output: Path | None, quiet: bool,
          no_color: bool) -> None:
    """Compare the project as it is now with holotype.lock, running nothing."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.check import check_project
        from holotype.render.progress import HashBar

        report = check_project(project, strict=strict, full=full, python=python,
                               progress=HashBar(session.err) if session.interactive else None)
        session.emit(report)

    run_guarded(body)


@app.command()
@click.argument("names", nargs=-1)
@click.option("--twice", is_flag=True, help="Run each analysis twice and flag outputs that differ.")
@click.option("--dry-run", is_flag=True, help="Print what would run, with which environment, and run nothing.")
@common(python=True)
def rerun(project: Path, names: tuple[str, ...], twice: bool, dry_run: bool, python: str | None, fmt: str,
          output: Path | None, quiet: bool, no_color: bool) -> None:
    """Run the analyses (all, or NAMES) with their seeds and compare every output with its baseline."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.rerun import rerun_project
        from holotype.render.progress import AnalysisPanel

        panel = AnalysisPanel(session.err) if session.interactive and not dry_run else None
        try:
            report = rerun_project(project, list(names), twice=twice, python=python, dry_run=dry_run,
                                   progress=panel)
        finally:
            if panel is not None:
                panel.close()
        session.emit(report)

    run_guarded(body)


@app.command()
@click.argument("names", nargs=-1)
@click.option("--reason", default=None, help="Why the new results replace the recorded ones (required).")
@common()
def accept(project: Path, names: tuple[str, ...], reason: str | None, fmt: str, output: Path | None, quiet: bool,
           no_color: bool) -> None:
    """Take the current outputs of the analyses (all, or NAMES) as the new baselines, and log why."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.accept import accept_outputs

        session.emit(accept_outputs(project, list(names), reason or ""))

    run_guarded(body)


@app.command()
@click.argument("expected", type=PATH)
@click.argument("actual", type=PATH)
@click.option("--atol", type=float, default=None, help="Absolute tolerance.")
@click.option("--rtol", type=float, default=None, help="Tolerance relative to the expected value.")
@click.option("--ulps", type=int, default=None, help="Distance in IEEE-754 binary64 steps.")
@click.option("--digits", type=float, default=None, help="Correct significant digits (log relative error).")
@click.option("--key", multiple=True, help="Match rows by this column (repeatable).")
@click.option("--sign-free", "sign_free", multiple=True, help="Columns (globs) that may flip sign as a whole.")
@click.option("--ignore", multiple=True, help="Skip these columns or JSON paths (globs).")
@common()
def compare(project: Path, expected: Path, actual: Path, atol: float | None, rtol: float | None, ulps: int | None,
            digits: float | None, key: tuple[str, ...], sign_free: tuple[str, ...], ignore: tuple[str, ...], fmt: str,
            output: Path | None, quiet: bool, no_color: bool) -> None:
    """Compare two result files, or two folders paired by relative path, within tolerances."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.compare_files import compare_inputs, rulebook_from_flags

        rules = rulebook_from_flags(atol, rtol, ulps, digits, list(key), list(sign_free), list(ignore))
        session.emit(compare_inputs(project / expected, project / actual, rules))

    run_guarded(body)


@app.command()
@click.argument("a", required=False, type=PATH)
@click.argument("b", required=False, type=PATH)
@click.option("--rev", default=None, help="Compare the lock committed at this git revision with the working copy's.")
@common()
def diff(project: Path, a: Path | None, b: Path | None, rev: str | None, fmt: str, output: Path | None, quiet: bool,
         no_color: bool) -> None:
    """What differs between two lockfiles (A B, or --rev REV against the working copy)."""
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

    run_guarded(body)


@app.command()
@click.argument("folder", type=PATH)
@click.option("--python", default=None, help="Interpreter to build it with (default: one of the locked version).")
@click.option("--find-links", multiple=True, help="Passed to the installer (repeatable).")
@click.option("--index-url", default=None, help="Passed to the installer.")
@click.option("--no-index", is_flag=True, help="Passed to the installer.")
@common()
def rebuild(project: Path, folder: Path, python: str | None, find_links: tuple[str, ...], index_url: str | None,
            no_index: bool, fmt: str, output: Path | None, quiet: bool, no_color: bool) -> None:
    """Build a fresh virtual environment in FOLDER that matches the lock, then check it."""
    session = Session(project, fmt, output, quiet, no_color)

    def body() -> None:
        from holotype.commands.rebuild import InstallerOptions, rebuild_environment

        session.say(f"building {folder} from holotype.lock …")
        options = InstallerOptions(list(find_links), index_url, no_index)
        session.emit(rebuild_environment(project, folder, python=python, installer=options))

    run_guarded(body)


@app.command()
@click.option("--format", "fmt", type=click.Choice(("requirements", "pylock")), default="requirements",
              show_default=True, help="requirements.txt pins or a PEP 751 pylock.toml.")
@click.option("--output", type=PATH, default=None, help="Write to FILE instead of stdout.")
@click.option("--find-links", multiple=True, type=PATH,
              help="Folders holding the locked wheels (pylock needs their hashes).")
@common(findings=False)
def export(project: Path, fmt: str, output: Path | None, find_links: tuple[Path, ...], quiet: bool,
           no_color: bool) -> None:
    """Write the locked packages in an open standard format."""
    session = Session(project, quiet=quiet, no_color=no_color)

    def body() -> None:
        from holotype.commands.export import export_lock

        _write_or_print(session, export_lock(project, fmt, list(find_links)), output)

    run_guarded(body)


@app.command()
@click.option("--format", "fmt", type=click.Choice(("markdown", "html")), default="markdown", show_default=True,
              help="Markdown, or one self-contained HTML file.")
@click.option("--output", type=PATH, default=None, help="Write to FILE instead of stdout.")
@common(findings=False)
def report(project: Path, fmt: str, output: Path | None, quiet: bool, no_color: bool) -> None:
    """A methods and provenance appendix for a thesis or paper."""
    session = Session(project, quiet=quiet, no_color=no_color)

    def body() -> None:
        from holotype.commands.report import build_report

        _write_or_print(session, build_report(project, fmt), output)

    run_guarded(body)


def _write_or_print(session: Session, text: str, output: Path | None) -> None:
    if output is None:
        sys.stdout.write(text)
        return
    from holotype.atomic import write_atomic

    write_atomic(output, text)
    session.say(f"wrote {output}")


@app.command()
@click.argument("folder", required=False, type=PATH, default=Path("holotype-demo"))
@common(findings=False)
def demo(project: Path, folder: Path, quiet: bool, no_color: bool) -> None:
    """The whole cycle on a bundled, invented lake survey (FOLDER: new or empty, default ./holotype-demo)."""
    session = Session(project, quiet=quiet, no_color=no_color)
    folder = project / folder

    def body() -> None:
        from holotype.demo.tour import run_demo

        console = session.console
        if quiet:
            from rich.console import Console

            console = Console(file=open(os.devnull, "w"))
        run_demo(folder, console)

    run_guarded(body)


def main() -> None:
    """Console-script entry point."""
    app(prog_name="holotype")
