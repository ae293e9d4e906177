"""`holotype compare EXPECTED ACTUAL`: two result files or two folders, judged by the comparison engine."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from holotype.compare.outputs import compare_paths
from holotype.errors import InputError, ToleranceError
from holotype.findings import Judgement
from holotype.findings.policy import apply_policy
from holotype.tolerance import Rule, RuleBook, default_tolerance, parse_rule_settings


def rulebook_from_flags(atol: float | None = None, rtol: float | None = None, ulps: int | None = None,
                        digits: float | None = None, key: list[str] | None = None,
                        sign_free: list[str] | None = None, ignore: list[str] | None = None, *,
                        skip_lines: list[str] | None = None, mask: list[str] | None = None) -> RuleBook:
    """The same rules the config builds, from compare's flags. No numeric flag: the project default."""
    settings: dict[str, Any] = {k: v for k, v in (("atol", atol), ("rtol", rtol), ("ulps", ulps),
                                                    ("digits", digits)) if v is not None}
    if key:
        settings["key"] = list(key)
    if ignore:
        settings["ignore"] = list(ignore)
    if skip_lines:
        settings["skip_lines"] = list(skip_lines)
    if mask:
        settings["mask"] = list(mask)
    try:
        parsed = parse_rule_settings(settings, "--")
    except ToleranceError as exc:
        raise ToleranceError(exc.detail.replace("_", "-")) from None
    rules = tuple(Rule(match=f"*:{glob}", settings={"sign_free": True}) for glob in (sign_free or []))
    rules += tuple(Rule(match=glob, settings={"sign_free": True}) for glob in (sign_free or []))
    return RuleBook(default=default_tolerance(parsed), rules=rules)


def compare_inputs(expected: Path, actual: Path, rules: RuleBook) -> Judgement:
    """Compare files or folders; unreadable or malformed inputs stop with exit 2."""
    for p in (expected, actual):
        if not p.exists():
            raise InputError("no such file or folder", p)
    if expected.is_dir() != actual.is_dir():
        raise InputError("compare two files or two folders, not one of each", actual)
    return Judgement("compare", apply_policy(compare_paths(expected, actual, rules)))
