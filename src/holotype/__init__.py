"""holotype: keep the reference specimen of a data analysis and check later runs against it.

The Python API, for notebooks and scripts (the command line calls the same functions)::

    import holotype

    report = holotype.compare_results("baseline/results.csv", "results.csv", rtol=1e-6, key=["lake"])
    report.ok, [f.message for f in report.findings]

    project = holotype.load_project(".")      # the validated holotype.toml
    holotype.check(".").ok                    # the project against holotype.lock, running nothing
    holotype.replay(".", ["summary"]).ok      # run analyses again and compare with the baselines

Every function returns a `Judgement` (findings with severities, `ok`, `to_dict()`), or raises a
`HolotypeError` naming the file or setting when it cannot judge. Names are loaded on first use,
so `import holotype` stays light. (`holotype.compare` is the comparison engine's package, hence the
function's longer name.)
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

__version__ = "0.2.0"

__all__ = ["Config", "Finding", "HolotypeError", "Judgement", "check", "compare_results", "load_project", "replay",
           "__version__"]

if TYPE_CHECKING:
    from pathlib import Path

    from holotype.config import Config
    from holotype.errors import HolotypeError
    from holotype.findings import Finding, Judgement

_LAZY = {"Config": "holotype.config", "Finding": "holotype.findings", "Judgement": "holotype.findings",
         "HolotypeError": "holotype.errors"}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'holotype' has no attribute {name!r}")


def compare_results(expected: str | Path, actual: str | Path, *, atol: float | None = None, rtol: float | None = None,
            ulps: int | None = None, digits: float | None = None, key: list[str] | None = None,
            sign_free: list[str] | None = None, ignore: list[str] | None = None,
            skip_lines: list[str] | None = None, mask: list[str] | None = None) -> Judgement:
    """Compare two result files, or two folders paired by relative path, within the given tolerances.

    With no numeric criterion the project default applies (rtol 1e-9, atol 1e-12)."""
    from pathlib import Path

    from holotype.commands.compare import compare_inputs, rulebook_from_flags

    rules = rulebook_from_flags(atol, rtol, ulps, digits, key, sign_free, ignore, skip_lines=skip_lines, mask=mask)
    return compare_inputs(Path(expected), Path(actual), rules)


def load_project(folder: str | Path = ".") -> Config:
    """The project's validated configuration (holotype.toml, or [tool.holotype] in pyproject.toml)."""
    from pathlib import Path

    from holotype.config import load_config

    return load_config(Path(folder))


def check(folder: str | Path = ".", *, strict: bool = False, full: bool = False) -> Judgement:
    """The project as it is now against its holotype.lock, running nothing."""
    from pathlib import Path

    from holotype.commands.check import check_project

    return check_project(Path(folder), strict=strict, full=full)


def replay(folder: str | Path = ".", names: list[str] | None = None, *, twice: bool = False) -> Judgement:
    """Run the analyses (all, or `names`) with their recorded seeds and compare every output with its baseline."""
    from pathlib import Path

    from holotype.commands.replay import replay_project

    return replay_project(Path(folder), names, twice=twice)
