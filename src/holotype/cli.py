"""The command line: parse options, call one function, render, choose the exit code. Nothing else.

Built on click. The shared options live on the group and on every command (so `-C DIR` works
before or after the command name) and meet in one `Session` on `ctx.obj`. Findings commands are
declared with `@findings_command`, which builds the session, calls the command body and renders
the report it returns. Errors have one path: a `HolotypeError` shows itself (exit 2,
one line), and `HolotypeGroup.main` turns usage errors and anything unexpected into one line too.
Heavy modules (NumPy, rich, the commands) are imported inside the bodies, so `--help` stays fast.
"""

from __future__ import annotations

import functools
import os
import sys
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

import click

from holotype import __version__
from holotype.render import APPENDIX, FINDINGS

if TYPE_CHECKING:
    from rich.console import Console

    from holotype.findings import Judgement
    from holotype.render.progress import AnalysisPanel, HashBar

CONTEXT = {"help_option_names": ["--help", "-h"], "max_content_width": 100}
UNSET = object()
WIDE = 100_000  # outside a terminal text is never wrapped, so paths stay whole in logs


class PathParam(click.ParamType):  # type: ignore[type-arg]
    """A path argument; a NUL byte is a usage error rather than a crash inside the OS call."""

    name = "path"

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Path:
        text = os.fspath(value)
        if "\x00" in text:
            self.fail(f"{text!r} contains a NUL byte", param, ctx)
        return Path(text)


PATH = PathParam()


def _console(stream: Any, no_color: bool) -> Console:
    from rich.console import Console

    terminal = hasattr(stream, "isatty") and stream.isatty()
    return Console(file=stream, no_color=no_color, highlight=False, width=None if terminal else WIDE,
                   soft_wrap=not terminal)


def _stdout() -> Any:
    """Standard output, or one clear line when it is closed (`holotype check >&-`)."""
    if sys.stdout is None:
        from holotype.errors import HolotypeError

        raise HolotypeError("standard output is closed; pass --output FILE or leave stdout open")
    return sys.stdout


class Session:
    """The options every command shares, the project they point at, and the consoles they imply."""

    def __init__(self, start: Path | None = None, *, fmt: str = "text", output: Path | None = None,
                 quiet: bool = False, no_color: bool = False, discover: bool = True) -> None:
        self.given = start
        self.fmt = fmt
        self.output = output
        self.quiet = quiet
        self.no_color = no_color or bool(os.environ.get("NO_COLOR"))
        self.discover = discover
        self._console: Console | None = None
        self._err: Console | None = None
        self._project: Path | None = None

    @property
    def project(self) -> Path:
        """-C DIR as given; else the nearest folder at or above this one that holds a project."""
        if self._project is None:
            if self.given is not None or not self.discover:
                self._project = self.given if self.given is not None else Path(".")
            else:
                from holotype.config import find_project
                from holotype.errors import HolotypeError

                try:
                    here = Path.cwd()
                except OSError:  # removed while a shell was still in it
                    raise HolotypeError("the current folder no longer exists; change to the project folder or "
                                        "pass -C DIR") from None
                found = find_project(here)
                if found != here:
                    self.say(f"project: {found}")
                self._project = found
        return self._project

    @property
    def console(self) -> Console:
        if self._console is None:
            self._console = _console(_stdout(), self.no_color)
        return self._console

    @property
    def err(self) -> Console:
        if self._err is None:
            self._err = _console(sys.stderr, self.no_color)
        return self._err

    @property
    def interactive(self) -> bool:
        return not self.quiet and self.fmt == "text" and self.err.is_terminal

    def say(self, message: str) -> None:
        if not self.quiet and sys.stderr is not None:
            self.err.print(message, markup=False)

    def write_text(self, text: str) -> None:
        """Write a document (appendix, pins) to --output, or to stdout without one."""
        if self.output is None:
            _stdout().write(text)
            return
        from holotype.safe_files import write_output

        write_output(self.output, text)
        self.say(f"wrote {self.output}")

    def show(self, report: Judgement) -> None:
        """The findings table on the terminal (rich is loaded only here, so --quiet never loads it)."""
        from holotype.render.terminal import print_report

        print_report(self.console, report)

    def emit(self, report: Judgement) -> int:
        """Render the report: the human table on the terminal (--output FILE also writes FILE); the exit code."""
        from holotype.render import format_for, render_findings

        for warning in report.warnings:
            self.say(f"warning: {warning}")
        if self.output is not None:
            fmt = self.fmt if self.fmt != "text" else format_for(self.output, FINDINGS, "text")
            from holotype.safe_files import write_output

            write_output(self.output, render_findings(report, fmt))
            if not self.quiet:
                self.show(report)
        elif self.fmt == "text":
            if not self.quiet:
                self.show(report)
        else:
            out = _stdout()
            out.write(render_findings(report, self.fmt))
            out.flush()
        if report.unwritten:  # the verdict above stands, but a file it needed could not be written
            from holotype.errors import WriteError

            raise WriteError(report.unwritten)
        return 0 if report.ok else 1


# ----------------------------------------------------------------------------- shared options


def _shared(f: Callable[..., Any], *, findings: bool, python: bool) -> Callable[..., Any]:
    """Add the options interface.md gives every command; UNSET marks 'not given here' (the group's wins)."""
    f = click.option("--no-color", is_flag=True, default=None, help="No colour (also: NO_COLOR=1).")(f)
    f = click.option("--quiet", is_flag=True, default=None, help="No progress, no table; the exit code tells.")(f)
    if findings:
        f = click.option("--output", type=PATH, default=None,
                         help="Write the findings to FILE (format from --format or the suffix); the terminal "
                              "still gets the table.")(f)
        f = click.option("--format", "fmt", type=click.Choice(list(FINDINGS)), default="text", show_default=True,
                         help="How to report findings.")(f)
    if python:
        f = click.option("--python", default=None, help="The analysis interpreter to use.")(f)
    return click.option("--project", "-C", "project", type=PATH, default=None,
                        help="The project folder (default: the nearest one at or above the current folder).")(f)


def _session(ctx: click.Context, project: Path | None, quiet: bool | None, no_color: bool | None,
             fmt: str = "text", output: Path | None = None, discover: bool = True) -> Session:
    top: dict[str, Any] = ctx.obj or {}
    return Session(project if project is not None else top.get("project"), fmt=fmt, output=output,
                   quiet=bool(quiet if quiet is not None else top.get("quiet")),
                   no_color=bool(no_color if no_color is not None else top.get("no_color")), discover=discover)


def findings_command(name: str, *, python: bool = False) -> Callable[[Callable[..., Judgement]], click.Command]:
    """A command whose body takes the session (and its own options) and returns a Judgement to render."""

    def decorate(body: Callable[..., Judgement]) -> click.Command:
        @functools.wraps(body)
        @click.pass_context
        def command(ctx: click.Context, /, project: Path | None, quiet: bool | None, no_color: bool | None,
                    fmt: str, output: Path | None, **options: Any) -> None:
            session = _session(ctx, project, quiet, no_color, fmt, output)
            ctx.exit(session.emit(body(session, **options)))

        command.__click_params__ = list(getattr(body, "__click_params__", []))  # type: ignore[attr-defined]
        return app.command(name)(_shared(command, findings=True, python=python))

    return decorate


def document_command(name: str, *, discover: bool = True) -> Callable[[Callable[..., None]], click.Command]:
    """A command that writes something other than findings (a config, a document, the demo)."""

    def decorate(body: Callable[..., None]) -> click.Command:
        @functools.wraps(body)
        @click.pass_context
        def command(ctx: click.Context, /, project: Path | None, quiet: bool | None, no_color: bool | None,
                    **options: Any) -> None:
            body(_session(ctx, project, quiet, no_color, discover=discover), **options)

        command.__click_params__ = list(getattr(body, "__click_params__", []))  # type: ignore[attr-defined]
        return app.command(name)(_shared(command, findings=False, python=False))

    return decorate


class HolotypeGroup(click.Group):
    """Every error as one line on stderr with exit 2: usage errors, HolotypeError, anything unexpected."""

    def main(self, args: Any = None, prog_name: str | None = None, complete_var: str | None = None,
             standalone_mode: bool = True, **extra: Any) -> Any:
        from holotype.errors import HolotypeError
        from holotype.phrasing import one_line

        def fail(message: str) -> None:
            if sys.stderr is not None:
                sys.stderr.write(f"holotype: {one_line(message)}\n")
                sys.stderr.flush()
            sys.exit(2)

        try:
            code = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        except click.exceptions.NoArgsIsHelpError as exc:  # plain `holotype`: the help, as --help shows it
            click.echo(exc.ctx.get_help() if exc.ctx else "")
            sys.exit(0)
        except click.UsageError as exc:
            where = f" (see 'holotype {exc.ctx.command.name} --help')" if exc.ctx and exc.ctx.parent else \
                " (see 'holotype --help')"
            fail(exc.format_message() + where)
        except HolotypeError as exc:  # the one error root: its own one-line show()
            exc.show()
            sys.exit(exc.exit_code)
        except click.ClickException as exc:  # click's own (a file option it cannot open, say)
            fail(exc.format_message())
        except (click.Abort, KeyboardInterrupt):
            fail("interrupted")
        except (SystemExit, click.exceptions.Exit):
            raise
        except RecursionError:
            fail("input nested too deeply to process (set HOLOTYPE_DEBUG=1 for details)")
        except Exception as exc:  # never a traceback for users; HOLOTYPE_DEBUG=1 shows it
            if os.environ.get("HOLOTYPE_DEBUG"):
                raise
            fail(f"internal error: {type(exc).__name__}: {exc} (set HOLOTYPE_DEBUG=1 for details)")
        sys.exit(code if isinstance(code, int) else 0)


@click.group(cls=HolotypeGroup, context_settings=CONTEXT)
@click.version_option(__version__, "--version", prog_name="holotype", message="%(prog)s %(version)s")
@click.option("--project", "-C", "project", type=PATH, default=None,
              help="The project folder (default: the nearest one at or above the current folder).")
@click.option("--quiet", is_flag=True, default=None, help="No progress, no table; the exit code tells.")
@click.option("--no-color", is_flag=True, default=None, help="No colour (also: NO_COLOR=1).")
@click.pass_context
def app(ctx: click.Context, project: Path | None, quiet: bool | None, no_color: bool | None) -> None:
    """Record exactly what a data analysis ran on, and prove later that it still gives the same numbers."""
    ctx.obj = {"project": project, "quiet": quiet, "no_color": no_color}


# ----------------------------------------------------------------------------- commands


@document_command("start", discover=False)
def start(session: Session) -> None:
    """Look at the folder and write a starter holotype.toml (never overwrites)."""
    from holotype.commands.start import start_project

    path = start_project(session.project)
    session.say(f"wrote {path}; edit it, then run 'holotype record'")


def _parallel(f: Callable[..., Any]) -> Callable[..., Any]:
    f = click.option("--cluster", default=None, metavar="ADDRESS",
                     help="Run the analyses on a Dask cluster: a scheduler address (tcp://host:8786) or the path "
                          "of a scheduler file (needs holotype[cluster]; default: the config's cluster key).")(f)
    return click.option("--jobs", "-j", type=click.IntRange(1, 4096), default=None,
                        help="Analyses at once (default: usable CPUs / threads; 1 runs them one after another).")(f)


def _hash_bar(session: Session) -> HashBar | None:
    """The hashing bar at a terminal; None (and rich not loaded) with --quiet, JSON or no terminal."""
    if not session.interactive:
        return None
    from holotype.render.progress import HashBar

    return HashBar(session.err)


def _analysis_panel(session: Session) -> AnalysisPanel | None:
    if not session.interactive:
        return None
    from holotype.render.progress import AnalysisPanel

    return AnalysisPanel(session.err)


@findings_command("record", python=True)
@click.option("--no-run", is_flag=True, help="Record the environment, data and code only.")
@_parallel
def record(session: Session, no_run: bool, python: str | None, jobs: int | None, cluster: str | None) -> Judgement:
    """Capture interpreter, packages, data, code and seeds; run the analyses; write holotype.lock."""
    from holotype.capture import head_start
    from holotype.capture.project import begin_digests

    panel = None
    try:
        # the probe, and the workers that digest big data folders, start while the rest of holotype loads
        head_start.begin_probe(session.project, python)
        begin_digests(session.project)
        from holotype.commands.record import record_project

        panel = _analysis_panel(session)
        return record_project(session.project, run=not no_run, python=python, hash_progress=_hash_bar(session),
                              run_progress=panel, jobs=jobs, cluster=cluster)
    finally:
        if panel is not None:
            panel.close()
        head_start.finish()


@findings_command("check", python=True)
@click.option("--full", is_flag=True, help="Hash every file again (no digest cache) and verify every baseline.")
@click.option("--strict", is_flag=True, help="Treat warnings as failures.")
def check(session: Session, full: bool, strict: bool, python: str | None) -> Judgement:
    """Compare the project as it is now with holotype.lock, running nothing."""
    from holotype.capture import head_start

    # the probe, and the stamp workers the last check asked for, start while the rest of holotype loads
    head_start.begin_probe(session.project, python)
    if not full:
        head_start.begin(session.project)
    try:
        from holotype.commands.check import check_project

        return check_project(session.project, strict=strict, full=full, python=python, progress=_hash_bar(session))
    finally:
        head_start.finish()


@findings_command("replay", python=True)
@click.argument("names", nargs=-1)
@click.option("--twice", is_flag=True, help="Run each analysis twice and flag outputs that differ.")
@click.option("--dry-run", is_flag=True, help="Print what would run, with which environment, and run nothing.")
@_parallel
def replay(session: Session, names: tuple[str, ...], twice: bool, dry_run: bool, python: str | None,
           jobs: int | None, cluster: str | None) -> Judgement:
    """Run the analyses (all, or NAMES) with their seeds and compare every output with its baseline."""
    from holotype.commands.replay import replay_project

    panel = _analysis_panel(session) if not dry_run else None
    try:
        return replay_project(session.project, list(names), twice=twice, python=python, dry_run=dry_run,
                              progress=panel, jobs=jobs, cluster=cluster,
                              announce=lambda line: session.say(f"warning: {line}"))
    finally:
        if panel is not None:
            panel.close()


@findings_command("adopt")
@click.argument("names", nargs=-1)
@click.option("--reason", default=None, help="Why the new results replace the recorded ones (required).")
def adopt(session: Session, names: tuple[str, ...], reason: str | None) -> Judgement:
    """Take the outputs of the analyses (all, or NAMES) as the new baselines, and log why."""
    from holotype.commands.adopt import adopt_outputs

    return adopt_outputs(session.project, list(names), reason or "")


@findings_command("tidy")
@click.option("--remove", is_flag=True, help="Remove them (without it: list what would go).")
def tidy(session: Session, remove: bool) -> Judgement:
    """List the baseline objects holotype.lock no longer references; --remove deletes them."""
    from holotype.commands.tidy import tidy_store

    return tidy_store(session.project, remove=remove)


@findings_command("compare")
@click.argument("expected", type=PATH)
@click.argument("actual", type=PATH)
@click.option("--atol", type=float, default=None, help="Absolute tolerance.")
@click.option("--rtol", type=float, default=None, help="Tolerance relative to the expected value.")
@click.option("--ulps", type=int, default=None, help="Distance in IEEE-754 binary64 steps.")
@click.option("--digits", type=float, default=None, help="Correct significant digits (log relative error).")
@click.option("--key", multiple=True, help="Match rows by this column (repeatable).")
@click.option("--sign-free", "sign_free", multiple=True, metavar="COLUMN",
              help="Columns (globs) that may flip sign as a whole (repeatable).")
@click.option("--ignore", multiple=True, help="Skip these columns or JSON paths (globs).")
@click.option("--skip-lines", "skip_lines", multiple=True, metavar="REGEX",
              help="Text outputs: leave out lines matching this regular expression (repeatable).")
@click.option("--mask", multiple=True, metavar="REGEX",
              help="Text outputs: do not compare text matching this regular expression (repeatable).")
def compare(session: Session, expected: Path, actual: Path, atol: float | None, rtol: float | None,
            ulps: int | None, digits: float | None, key: tuple[str, ...], sign_free: tuple[str, ...],
            ignore: tuple[str, ...], skip_lines: tuple[str, ...], mask: tuple[str, ...]) -> Judgement:
    """Compare two result files, or two folders paired by relative path, within tolerances."""
    from holotype.commands.compare import compare_inputs, rulebook_from_flags

    rules = rulebook_from_flags(atol, rtol, ulps, digits, list(key), list(sign_free), list(ignore),
                                skip_lines=list(skip_lines), mask=list(mask))
    base = session.given if session.given is not None else Path(".")
    return compare_inputs(base / expected, base / actual, rules)


@findings_command("diff")
@click.argument("a", required=False, type=PATH)
@click.argument("b", required=False, type=PATH)
@click.option("--rev", default=None, help="Compare the lock committed at this git revision with the working copy's.")
def diff(session: Session, a: Path | None, b: Path | None, rev: str | None) -> Judgement:
    """What differs between two lockfiles (A B, or --rev REV against the working copy)."""
    from holotype.commands.diff import diff_files, diff_revision
    from holotype.errors import HolotypeError

    if rev is not None:
        if a is not None or b is not None:
            raise HolotypeError("give either two lockfiles or --rev REV, not both")
        return diff_revision(session.project, rev)
    if a is None or b is None:
        raise HolotypeError("diff needs two lockfiles (A.lock B.lock) or --rev REV")
    base = session.given if session.given is not None else Path(".")
    return diff_files(base / a, base / b, session.project)


@findings_command("pinpoint")
@click.option("--max-runs", type=click.IntRange(1, 10_000), default=32, show_default=True,
              help="At most this many candidate runs; what was proven by then is reported.")
@click.option("--keep", is_flag=True, help="Keep the candidate environments' folders for inspection.")
@click.option("--find-links", multiple=True, help="Passed to the installer (repeatable).")
@click.option("--index-url", default=None, help="Passed to the installer.")
@click.option("--no-index", is_flag=True, help="Passed to the installer.")
def pinpoint(session: Session, max_runs: int, keep: bool, find_links: tuple[str, ...], index_url: str | None,
             no_index: bool) -> Judgement:
    """After a failed replay, find which recorded difference moves which output."""
    from holotype.commands.pinpoint import pinpoint_project
    from holotype.render.progress import SearchBar
    from holotype.standards.installer import InstallerOptions

    bar = SearchBar(session.err) if session.interactive else None
    try:
        return pinpoint_project(session.project, max_runs=max_runs, keep=keep,
                                installer=InstallerOptions(list(find_links), index_url, no_index),
                                say=bar.say if bar else session.say, progress=bar.run if bar else None)
    finally:
        if bar is not None:
            bar.close()


@findings_command("recreate")
@click.argument("folder", type=PATH)
@click.option("--python", default=None, help="Interpreter to build it with (default: one of the locked version).")
@click.option("--find-links", multiple=True, help="Passed to the installer (repeatable).")
@click.option("--index-url", default=None, help="Passed to the installer.")
@click.option("--no-index", is_flag=True, help="Passed to the installer.")
@click.option("--use-folder", "use_folder", multiple=True, metavar="RECORDED=LOCAL",
              help="Where the source of an editable or local-folder package is here (repeatable).")
def recreate(session: Session, folder: Path, python: str | None, find_links: tuple[str, ...],
             index_url: str | None, no_index: bool, use_folder: tuple[str, ...]) -> Judgement:
    """Build a fresh virtual environment in FOLDER that matches the lock, then check it."""
    from holotype.commands.recreate import recreate_environment
    from holotype.standards.installer import InstallerOptions

    folders: dict[str, str] = {}
    for item in use_folder:
        recorded, sep, local = item.partition("=")
        if not sep or not recorded or not local:
            raise click.UsageError(f"--use-folder {item!r} should be RECORDED=LOCAL")
        folders[recorded] = local
    session.say(f"building {folder} from holotype.lock …")
    options = InstallerOptions(list(find_links), index_url, no_index)
    return recreate_environment(session.project, folder, python=python, installer=options, folders=folders)


@document_command("pins")
@click.option("--to", "target", type=click.Choice(("requirements", "pylock")), default="requirements",
              show_default=True, help="requirements.txt pins or a PEP 751 pylock.toml.")
@click.option("--output", type=PATH, default=None, help="Write to FILE (default: standard output).")
@click.option("--find-links", multiple=True, type=PATH,
              help="Folders holding the locked wheels (pylock needs their hashes).")
def pins(session: Session, target: str, output: Path | None, find_links: tuple[Path, ...]) -> None:
    """Write the locked packages in an open standard format."""
    from holotype.commands.pins import pin_packages

    session.output = output
    session.write_text(pin_packages(session.project, target, list(find_links)))


@document_command("report")
@click.option("--format", "fmt", type=click.Choice(list(APPENDIX)), default="markdown", show_default=True,
              help="Markdown, or one self-contained HTML file.")
@click.option("--output", type=PATH, default=None, help="Write to FILE (default: standard output).")
def report(session: Session, fmt: str, output: Path | None) -> None:
    """A methods and provenance appendix for a thesis or paper."""
    from holotype.commands.report import build_report

    session.output = output
    session.write_text(build_report(session.project, fmt))


@document_command("demo", discover=False)
@click.argument("folder", required=False, type=PATH, default=Path("holotype-demo"))
def demo(session: Session, folder: Path) -> None:
    """The whole cycle on a bundled, invented lake survey (FOLDER: new or empty, default ./holotype-demo)."""
    from rich.console import Console

    from holotype.demo.tour import run_demo

    if session.quiet:
        with open(os.devnull, "w", encoding="utf-8") as sink:
            run_demo(session.project / folder, Console(file=sink))
        return
    # a narrated tour reads best at the terminal's width (80 columns in a log), unlike findings tables
    run_demo(session.project / folder, Console(file=sys.stdout, no_color=session.no_color, highlight=False))


def main() -> None:
    """Console-script entry point."""
    app(prog_name="holotype")
