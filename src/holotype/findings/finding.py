"""The Finding type: one thing holotype noticed, with numbers for output comparisons."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

from holotype.phrasing import clip, visible
from holotype.redaction import redact, secret_values

MAX_LISTED = 50  # list values (columns, paths) kept in a finding beyond which only the count is said
AREAS = ("interpreter", "platform", "package", "numeric", "data", "code", "seed", "judgement", "analysis", "output",
         "environment", "lockfile")


@dataclass(frozen=True)
class OutputStats:
    """How an output compared with its baseline."""

    compared: int = 0
    mismatches: int = 0
    max_abs_err: float = 0.0
    max_rel_err: float = 0.0
    worst: str | None = None
    min_lre: float | None = None  # fewest correct significant digits seen (log relative error)
    tolerance: str = ""
    # counts of values per decade of relative error: {"1e-16": 3, ...}; "exact" for zero error
    error_decades: dict[str, int] = field(default_factory=dict)
    columns: tuple[dict[str, Any], ...] = ()  # per column / path / array detail


@dataclass(frozen=True)
class Finding:
    """One observation. `kind` names the policy entry that decides its severity."""

    area: str
    subject: str
    kind: str
    message: str
    expected: Any = None
    actual: Any = None
    severity: str = "info"
    stats: OutputStats | None = None
    # for an output that did not reproduce exactly: recorded differences that can move it, most likely first
    candidates: tuple[str, ...] = ()
    # a rule's `severity` for this output: the most a failing comparison of it counts as
    ceiling: str | None = None

    def with_severity(self, severity: str) -> Finding:
        return replace(self, severity=severity)

    def to_dict(self) -> dict[str, Any]:
        """The interface's JSON shape for one finding."""
        out: dict[str, Any] = {
            "area": self.area,
            "subject": self.subject,
            "severity": self.severity,
            "kind": self.kind,
            "message": self.message,
            "expected": self.expected,
            "actual": self.actual,
        }
        if self.stats is not None:
            s = self.stats
            out.update(
                compared=s.compared,
                mismatches=s.mismatches,
                max_abs_err=json_number(s.max_abs_err),
                max_rel_err=json_number(s.max_rel_err),
                worst=s.worst,
                min_lre=s.min_lre,
                tolerance=s.tolerance,
                error_decades=s.error_decades,
                columns=list(s.columns),
            )
        if self.candidates:
            out["candidates"] = list(self.candidates)
        return out


def json_number(x: float) -> float | str:
    """A float for JSON, which has no inf or nan: those keep their meaning as text."""
    if x != x:
        return "nan"
    if x in (float("inf"), float("-inf")):
        return "inf" if x > 0 else "-inf"
    return x


def _clean_text(text: str, secrets: dict[str, str]) -> str:
    return visible(redact(text, secrets))


def _clean_value(value: Any, secrets: dict[str, str]) -> Any:
    if isinstance(value, str):
        return visible(redact(str(clip(value)), secrets))
    if isinstance(value, (list, tuple)):
        return [_clean_value(v, secrets) for v in value[:MAX_LISTED]] + (
            [f"… and {len(value) - MAX_LISTED:,} more"] if len(value) > MAX_LISTED else [])
    return value


def _clean_finding(f: Finding, secrets: dict[str, str]) -> Finding:
    stats = f.stats
    if stats is not None and (stats.worst or stats.columns):
        columns = tuple({k: _clean_value(v, secrets) for k, v in c.items()} for c in stats.columns)
        stats = replace(stats, worst=_clean_value(stats.worst, secrets), columns=columns)
    return replace(f, subject=_clean_text(f.subject, secrets), message=_clean_text(str(clip(f.message, 4000)), secrets),
                   expected=_clean_value(f.expected, secrets), actual=_clean_value(f.actual, secrets), stats=stats,
                   candidates=tuple(_clean_text(c, secrets) for c in f.candidates))


@dataclass(frozen=True)
class Judgement:
    """What a command hands to a renderer."""

    command: str
    findings: tuple[Finding, ...]
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()  # about the config itself (unknown keys, precedence): printed on stderr
    verdict: bool = True  # False for a plan (a dry run): it says what would happen, not whether it reproduced
    unwritten: str | None = None  # a file the command had to write and could not (the verdict still stands)

    def __post_init__(self) -> None:
        # the one funnel every command's findings pass: what reaches a terminal, a report or a file has its
        # control characters escaped (terminal escapes, C1, bidi), secrets redacted and long values clipped
        secrets = secret_values()
        object.__setattr__(self, "findings", tuple(_clean_finding(f, secrets) for f in self.findings))
        object.__setattr__(self, "notes", tuple(_clean_text(n, secrets) for n in self.notes))
        object.__setattr__(self, "warnings", tuple(_clean_text(w, secrets) for w in self.warnings))

    @property
    def ok(self) -> bool:
        return not any(f.severity == "fail" for f in self.findings)

    def counts(self) -> dict[str, int]:
        out = {"fail": 0, "warn": 0, "info": 0}
        for f in self.findings:
            out[f.severity] += 1
        return out

    def to_dict(self) -> dict[str, Any]:
        return {"ok": self.ok, "command": self.command, "findings": [f.to_dict() for f in self.findings]}
