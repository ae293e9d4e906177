"""The user's holotype.toml (or [tool.holotype] in pyproject.toml), read and validated."""

from __future__ import annotations

import difflib
import math
import re
import shlex
import tomllib
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

from holotype.errors import ConfigError, InputError, SeedError, ToleranceError
from holotype.findings.policy import DEFAULT_SEVERITY, SEVERITIES
from holotype.safe_files import read_regular
from holotype.tolerance import DEFAULT_TOLERANCE, RULE_KEYS, Rule, RuleBook, default_tolerance, parse_rule_settings

CONFIG_NAME = "holotype.toml"
TOP_KEYS = (
    "python", "data", "code", "exclude", "seed", "threads", "seed_globals",
    "tolerance", "rules", "analyses", "policy", "allow_outside", "cluster",
)
ANALYSIS_KEYS = ("command", "notebook", "outputs", "inputs", "timeout")
NOTEBOOK_RUNNER = "python -m holotype_notebook"  # run/hook/holotype_notebook.py, on every analysis' PYTHONPATH
MAX_SEED = 2**63 - 1
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


@dataclass(frozen=True)
class Analysis:
    name: str
    command: str
    outputs: tuple[str, ...]
    inputs: tuple[str, ...] = ()
    timeout: float | None = None


@dataclass(frozen=True)
class Config:
    root: Path
    source: Path | None  # None when the project has no config (environment-only use)
    python: str | None = None
    data: tuple[str, ...] = ()
    code: tuple[str, ...] | None = None
    exclude: tuple[str, ...] = ()
    seed: int | None = None
    threads: int | None = None
    seed_globals: bool = False
    rulebook: RuleBook = field(default_factory=RuleBook)
    analyses: tuple[Analysis, ...] = ()
    policy: dict[str, str] = field(default_factory=dict)
    allow_outside: bool = False
    cluster: str | None = None  # a Dask scheduler address or scheduler file: where analyses run
    warnings: tuple[str, ...] = ()

    def analysis(self, name: str) -> Analysis:
        for a in self.analyses:
            if a.name == name:
                return a
        raise ConfigError(f"no analysis named '{name}' (have: {', '.join(a.name for a in self.analyses) or 'none'})",
                          self.source)

    def select(self, names: list[str] | None) -> list[Analysis]:
        """The analyses to run (all, or `names`), in run order; an unknown name is an error."""
        ordered = run_order(self.analyses, self.source)
        if not names:
            return ordered
        known = {a.name for a in ordered}
        unknown = [n for n in names if n not in known]
        if unknown:
            raise ConfigError(f"no analysis named {', '.join(repr(n) for n in unknown)} "
                              f"(declared: {', '.join(sorted(known)) or 'none'})", self.source)
        return [a for a in ordered if a.name in names]

    def seed_to_use(self, recorded: int | None) -> int:
        """The project seed analyses run with: the config's, else the recorded one."""
        if self.seed is not None:
            return self.seed
        if recorded is not None:
            return recorded
        raise SeedError("no project seed in the config or the lock; run holotype record", self.source)


def run_order(analyses: tuple[Analysis, ...], source: Path | None = None) -> list[Analysis]:
    """Declared order, except that an analysis reading another's output runs after it; cycles are errors.

    Depth-first without recursion, so a chain of thousands of analyses is fine.
    """
    producer = {out: a.name for a in analyses for out in a.outputs}
    by_name = {a.name: a for a in analyses}
    order: list[Analysis] = []
    state: dict[str, int] = {}  # 1 visiting, 2 done
    for first in analyses:
        if state.get(first.name) == 2:
            continue
        stack: list[tuple[Analysis, int]] = [(first, 0)]
        state[first.name] = 1
        while stack:
            a, i = stack[-1]
            if i < len(a.inputs):
                stack[-1] = (a, i + 1)
                dep = producer.get(a.inputs[i])
                if dep is None or dep == a.name or state.get(dep) == 2:
                    continue
                if state.get(dep) == 1:
                    chain = [s[0].name for s in stack] + [dep]
                    chain = chain[chain.index(dep):]
                    raise ConfigError("analyses depend on each other in a cycle: " + " → ".join(chain), source)
                state[dep] = 1
                stack.append((by_name[dep], 0))
                continue
            stack.pop()
            state[a.name] = 2
            order.append(a)
    return order


def _suggest(name: str, known: tuple[str, ...] | list[str]) -> str:
    close = difflib.get_close_matches(name, list(known), n=1)
    return f" (did you mean '{close[0]}'?)" if close else ""


class _Validator:
    def __init__(self, path: Path, root: Path, allow_outside: bool) -> None:
        self.path = path
        self.root = root
        self.allow_outside = allow_outside
        self.warnings: list[str] = []

    def fail(self, message: str) -> ConfigError:
        return ConfigError(message, self.path)

    def unknown(self, table: dict[str, Any], known: tuple[str, ...], where: str) -> None:
        for key in table:
            if key not in known:
                self.warnings.append(f"{self.path}: unknown key '{where}{key}'{_suggest(key, known)}; ignored")

    def project_path(self, value: Any, where: str, *, glob: bool = True) -> str:
        if not isinstance(value, str) or not value:
            raise self.fail(f"{where} should be a non-empty path string, found {value!r}")
        if "\x00" in value:
            raise self.fail(f"{where} contains a NUL byte")
        if "\\" in value:
            raise self.fail(f"{where} '{value}' uses backslashes; write project paths with '/'")
        if re.match(r"^[A-Za-z]:", value):
            raise self.fail(f"{where} '{value}' is a Windows drive path; use a path inside the project")
        pure = PurePosixPath(value)
        leaves = pure.is_absolute() or ".." in pure.parts
        if leaves and not self.allow_outside:
            raise self.fail(f"{where} '{value}' leaves the project; set allow_outside = true to permit it")
        return value

    def paths(self, doc: dict[str, Any], key: str, where: str = "") -> tuple[str, ...]:
        value = doc.get(key, [])
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list):
            raise self.fail(f"'{where}{key}' should be a list of paths, found {type(value).__name__}")
        return tuple(self.project_path(v, f"'{where}{key}' entry") for v in value)


def _int(value: Any, where: str, v: _Validator, low: int, high: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise v.fail(f"'{where}' should be a whole number, found {value!r}")
    if not low <= value <= high:
        raise v.fail(f"'{where}' should be between {low} and {high}, found {value}")
    return value


def _tolerance(table: Any, where: str, v: _Validator, *, is_rule: bool) -> dict[str, Any]:
    if not isinstance(table, dict):
        raise v.fail(f"'{where}' should be a table")
    known = (("match",) if is_rule else ()) + RULE_KEYS
    v.unknown(table, known, f"{where}.")
    settings = {k: val for k, val in table.items() if k in RULE_KEYS}
    try:
        return parse_rule_settings(settings, f"{where}.")
    except ToleranceError as exc:
        raise ToleranceError(exc.detail, v.path) from None


def _bool(doc: dict[str, Any], key: str, v: _Validator) -> bool:
    value = doc.get(key, False)
    if not isinstance(value, bool):
        raise v.fail(f"'{key}' should be true or false, found {value!r}")
    return value


def _rules(doc: dict[str, Any], v: _Validator) -> RuleBook:
    """[tolerance] and [[rules]]."""
    default = DEFAULT_TOLERANCE
    if "tolerance" in doc:
        default = default_tolerance(_tolerance(doc["tolerance"], "tolerance", v, is_rule=False))
    rules: list[Rule] = []
    raw_rules = doc.get("rules", [])
    if not isinstance(raw_rules, list):
        raise v.fail("'rules' should be an array of tables ([[rules]])")
    for i, table in enumerate(raw_rules):
        where = f"rules[{i}]"
        settings = _tolerance(table, where, v, is_rule=True)
        match = table.get("match")
        if not isinstance(match, str) or not match or "\x00" in match:
            raise v.fail(f"'{where}.match' should be a glob like 'results/*.csv:PC*'")
        rules.append(Rule(match=match, settings=settings))
    return RuleBook(default=default, rules=tuple(rules))


def _analysis(name: str, table: Any, v: _Validator) -> Analysis:
    """One [analyses.NAME] table."""
    where = f"analyses.{name}"
    if not _NAME.match(name):
        raise v.fail(f"analysis name '{name}' should use letters, digits, '.', '_' or '-'")
    if not isinstance(table, dict):
        raise v.fail(f"'{where}' should be a table")
    v.unknown(table, ANALYSIS_KEYS, where + ".")
    outputs = v.paths(table, "outputs", where + ".")
    if not outputs:
        raise v.fail(f"'{where}.outputs' should list at least one output file")
    notebook = table.get("notebook")
    if notebook is not None:
        if "command" in table:
            raise v.fail(f"'{where}' sets both 'command' and 'notebook'; an analysis is one or the other")
        if not isinstance(notebook, str) or not notebook.endswith(".ipynb"):
            raise v.fail(f"'{where}.notebook' should be the path of a .ipynb notebook to execute")
        [notebook] = v.paths({"notebook": [notebook]}, "notebook", where + ".")
        executed = [o for o in outputs if o.endswith(".ipynb")]
        if not executed:
            raise v.fail(f"'{where}.outputs' should name where the executed notebook goes (a .ipynb path)")
        if executed[0] == notebook:
            raise v.fail(f"'{where}': the executed notebook cannot replace '{notebook}' itself; name another path "
                         "in 'outputs'")
        command = f"{NOTEBOOK_RUNNER} {shlex.quote(notebook)} {shlex.quote(executed[0])}"
    else:
        given = table.get("command")
        if not isinstance(given, str) or not given.strip():
            raise v.fail(f"'{where}.command' should be the command to run, e.g. \"python analysis/{name}.py\", "
                         f"or set 'notebook' to a .ipynb to execute")
        command = given
    if "\x00" in command:
        raise v.fail(f"'{where}.command' contains a NUL byte")
    timeout = table.get("timeout")
    if timeout is not None:
        if isinstance(timeout, bool) or not isinstance(timeout, (int, float)) or math.isnan(timeout) \
                or not 0 < timeout <= 7 * 86400:
            raise v.fail(f"'{where}.timeout' should be seconds above 0 (at most a week), found {timeout!r}")
        timeout = float(timeout)
    return Analysis(name, command, outputs, v.paths(table, "inputs", where + "."), timeout)


def _analyses(doc: dict[str, Any], v: _Validator) -> tuple[Analysis, ...]:
    """The [analyses] table: each analysis, no output declared twice, no dependency cycle."""
    raw = doc.get("analyses", {})
    if not isinstance(raw, dict):
        raise v.fail("'analyses' should be a table of [analyses.NAME] tables")
    analyses = tuple(_analysis(name, table, v) for name, table in raw.items())
    seen_outputs: dict[str, str] = {}
    for a in analyses:
        for out in a.outputs:
            if out in seen_outputs:
                raise v.fail(f"output '{out}' is declared by both '{seen_outputs[out]}' and '{a.name}'")
            seen_outputs[out] = a.name
    run_order(analyses, v.path)  # a dependency cycle is a config error, found before anything runs
    return analyses


def _policy(doc: dict[str, Any], v: _Validator) -> dict[str, str]:
    """The [policy] table: finding kind → fail, warn or info."""
    table = doc.get("policy", {})
    if not isinstance(table, dict):
        raise v.fail("'policy' should be a table of finding kinds to fail/warn/info")
    policy: dict[str, str] = {}
    for kind, severity in table.items():
        if kind not in DEFAULT_SEVERITY:
            raise v.fail(f"'policy.{kind}' is not a finding kind{_suggest(kind, list(DEFAULT_SEVERITY))}")
        if severity not in SEVERITIES:
            raise v.fail(f"'policy.{kind}' should be one of fail, warn, info; found {severity!r}")
        policy[kind] = severity
    return policy


def config_from_dict(doc: dict[str, Any], root: Path, source: Path) -> Config:
    """Validate the holotype table and build a Config: one validator per table."""
    allow_outside = doc.get("allow_outside", False)
    v = _Validator(source, root, bool(allow_outside))
    _bool(doc, "allow_outside", v)
    v.unknown(doc, TOP_KEYS, "")
    python = doc.get("python")
    if python is not None and (not isinstance(python, str) or not python or "\x00" in python):
        raise v.fail(f"'python' should be a path to an interpreter, found {python!r}")
    seed = doc.get("seed")
    threads = doc.get("threads")
    cluster = doc.get("cluster")
    if cluster is not None and (not isinstance(cluster, str) or not cluster.strip() or "\x00" in cluster):
        raise v.fail(f"'cluster' should be a Dask scheduler address like \"tcp://host:8786\" or the path of a "
                     f"scheduler file, found {cluster!r}")
    return Config(
        root=root,
        source=source,
        python=python,
        data=v.paths(doc, "data"),
        code=v.paths(doc, "code") if "code" in doc else None,
        exclude=tuple(_glob_list(doc, "exclude", v)),
        seed=None if seed is None else _int(seed, "seed", v, 0, MAX_SEED),
        threads=None if threads is None else _int(threads, "threads", v, 1, 4096),
        seed_globals=_bool(doc, "seed_globals", v),
        rulebook=_rules(doc, v),
        analyses=_analyses(doc, v),
        policy=_policy(doc, v),
        allow_outside=bool(allow_outside),
        cluster=cluster,
        warnings=tuple(v.warnings),
    )


def _glob_list(doc: dict[str, Any], key: str, v: _Validator) -> list[str]:
    value = doc.get(key, [])
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not all(isinstance(x, str) and x and "\x00" not in x for x in value):
        raise v.fail(f"'{key}' should be a list of glob patterns")
    return value


MAX_CONFIG_BYTES = 16 << 20


def _read_toml(path: Path) -> dict[str, Any]:
    try:
        raw = read_regular(path, limit=MAX_CONFIG_BYTES)
    except InputError as exc:
        raise ConfigError(exc.detail, path) from None
    try:
        return tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise ConfigError(f"not UTF-8 text (byte {exc.start})", path) from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"invalid TOML: {exc}", path) from None
    except RecursionError:
        raise ConfigError("invalid TOML: nested too deeply", path) from None


def holds_project(folder: Path) -> bool:
    """Whether `folder` has a holotype.toml, or a pyproject.toml with a [tool.holotype] table."""
    if (folder / CONFIG_NAME).exists():
        return True
    pyproject = folder / "pyproject.toml"
    if not pyproject.exists():
        return False
    try:
        doc = tomllib.loads(read_regular(pyproject, limit=MAX_CONFIG_BYTES).decode("utf-8"))
    except (InputError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError):
        return False
    tool = doc.get("tool")
    return isinstance(tool, dict) and "holotype" in tool


def find_project(start: Path) -> Path:
    """The nearest folder at or above `start` that holds a project (as version control finds its repository);
    `start` itself when none does."""
    start = Path(start).absolute()
    for folder in (start, *start.parents):
        if holds_project(folder):
            return folder
    return start


def find_config_source(root: Path) -> tuple[Path | None, dict[str, Any] | None, list[str]]:
    """Which file holds the configuration, its holotype table, and warnings about the choice."""
    own = root / CONFIG_NAME
    pyproject = root / "pyproject.toml"
    warnings: list[str] = []
    in_pyproject = None
    if pyproject.is_file():
        doc = _read_toml(pyproject)
        tool = doc.get("tool", {})
        if isinstance(tool, dict) and "holotype" in tool:
            in_pyproject = tool["holotype"]
            if not isinstance(in_pyproject, dict):
                raise ConfigError("[tool.holotype] should be a table", pyproject)
    if own.exists():
        if in_pyproject is not None:
            warnings.append(f"{own}: both holotype.toml and [tool.holotype] in pyproject.toml exist; "
                            "using holotype.toml")
        return own, _read_toml(own), warnings
    if in_pyproject is not None:
        return pyproject, in_pyproject, warnings
    return None, None, warnings


def load_config(root: Path, *, required: bool = True) -> Config:
    """Load the project's configuration; with required=False a project without one gets defaults."""
    root = Path(root)
    if not root.is_dir():
        raise ConfigError("project folder does not exist", root)
    source, doc, warnings = find_config_source(root)
    if source is None or doc is None:
        if required:
            raise ConfigError("no holotype.toml or [tool.holotype] here; run 'holotype start' first", root)
        return Config(root=root, source=None)
    config = config_from_dict(doc, root, source)
    if warnings:
        object.__setattr__(config, "warnings", tuple(warnings) + config.warnings)
    return config
