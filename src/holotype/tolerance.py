"""Tolerance settings and the rules that choose them per output and column (no NumPy here)."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field, replace
from fnmatch import fnmatchcase
from typing import Any

from holotype.errors import ToleranceError

NUMERIC_KEYS = ("atol", "rtol", "ulps", "digits")
TEXT_KEYS = ("skip_lines", "mask", "whitespace")  # text-like outputs: lines skipped, patterns masked, spacing
IMAGE_KEYS = ("channel_delta", "pixel_share")  # images: how far a pixel may move, how many pixels may
OUTPUT_KEYS = ("format", "record_only", "severity")  # any output: how it is read, whether compared, how bad
RULE_KEYS = (*NUMERIC_KEYS, "sign_free", "key", "ignore", *TEXT_KEYS, *IMAGE_KEYS, *OUTPUT_KEYS)
SEVERITY_NAMES = ("fail", "warn", "info")
WHITESPACE_CHOICES = ("any", "exact")

# Why these defaults (see docs/tolerances.md): last-bit noise from another BLAS or libm is
# a few ULPs, about 1e-15 relative, and sums of a million terms may grow it a thousand-fold;
# 1e-9 relative leaves that room six orders over, while a real change (one edited datum,
# a changed method) moves a statistic by far more. atol covers results that should be zero.
DEFAULT_RTOL = 1e-9
DEFAULT_ATOL = 1e-12


@dataclass(frozen=True)
class Tolerance:
    """What passes as equal for one value: it passes when it meets at least one numeric criterion set."""

    atol: float | None = None
    rtol: float | None = None
    ulps: int | None = None
    digits: float | None = None
    sign_free: bool = False
    key: tuple[str, ...] = ()
    ignore: tuple[str, ...] = ()
    skip_lines: tuple[str, ...] = ()  # regular expressions: matching lines are left out on both sides
    mask: tuple[str, ...] = ()  # regular expressions: matching text inside lines is not compared
    whitespace: str | None = None  # "exact": spacing must match; default: a run of spaces is one separator
    channel_delta: int | None = None  # images: the largest channel difference a pixel may have (0-255)
    pixel_share: float | None = None  # images: the fraction of pixels that may exceed channel_delta
    format: str | None = None  # declared format (text, csv, json, image, notebook, bytes, …)
    record_only: bool = False  # digest kept, a change is only information
    severity: str | None = None  # what a failing comparison of the output counts as (fail, warn, info)

    @property
    def exact(self) -> bool:
        return all(getattr(self, k) is None for k in NUMERIC_KEYS)

    def overlay(self, settings: dict[str, Any]) -> Tolerance:
        """This tolerance with the keys set in `settings` replaced."""
        return replace(self, **settings) if settings else self

    def summary(self) -> dict[str, Any]:
        """The set keys only, for the lockfile and reports."""
        out: dict[str, Any] = {}
        for name in RULE_KEYS:
            value = getattr(self, name)
            if value is None or value == () or value is False:
                continue
            out[name] = list(value) if isinstance(value, tuple) else value
        return out

    @classmethod
    def from_summary(cls, summary: dict[str, Any]) -> Tolerance:
        """The inverse of `summary` (as read back from the lockfile); unknown keys are ignored."""
        settings = {k: tuple(v) if isinstance(v, list) else v for k, v in summary.items() if k in RULE_KEYS}
        return cls().overlay(settings)

    def describe(self) -> str:
        parts = [f"{k}={getattr(self, k):g}" for k in NUMERIC_KEYS if getattr(self, k) is not None]
        if self.sign_free:
            parts.append("sign-free")
        return ", ".join(parts) or "exact"


DEFAULT_TOLERANCE = Tolerance(atol=DEFAULT_ATOL, rtol=DEFAULT_RTOL)

# Images (see docs/tolerances.md): a pixel counts as changed when one of its channels moved by more than
# 16 of 255 (smooth-shading and colour-rounding noise stays below that), and an image passes while at most
# 0.5 % of its pixels changed: re-rasterised anti-aliased text and line edges in another version of a
# plotting library touch a few tenths of a percent (0.4 % was seen on field-study figures), while a moved
# curve, a new point or other axis limits touch far more. A rule of thumb of common practice, not a standard.
IMAGE_DEFAULTS = (16, 0.005)


@dataclass(frozen=True)
class Rule:
    """One [[rules]] entry: a glob on the output path, optionally ':' and a column or JSON path glob."""

    match: str
    settings: dict[str, Any] = field(default_factory=dict)

    @property
    def output_glob(self) -> str:
        return self.match.split(":", 1)[0]

    @property
    def column_glob(self) -> str | None:
        parts = self.match.split(":", 1)
        return parts[1] if len(parts) == 2 else None

    def applies_to(self, output: str, column: str | None) -> bool:
        if not fnmatchcase(output, self.output_glob):
            return False
        glob = self.column_glob
        if glob is None:
            return True
        return column is not None and fnmatchcase(column, glob)


@dataclass(frozen=True)
class RuleBook:
    """The project default plus ordered rules; later rules win key by key."""

    default: Tolerance = DEFAULT_TOLERANCE
    rules: tuple[Rule, ...] = ()

    def for_output(self, output: str) -> Tolerance:
        """Settings from rules that name the whole output (no column part)."""
        tol = self.default
        for rule in self.rules:
            if rule.column_glob is None and rule.applies_to(output, None):
                tol = tol.overlay(rule.settings)
        return tol

    def for_column(self, output: str, column: str) -> Tolerance:
        tol = self.default
        for rule in self.rules:
            if rule.applies_to(output, column):
                tol = tol.overlay(rule.settings)
        return tol


# the formats a rule may declare (compare/formats registers a comparer under each name but "bytes")
FORMAT_NAMES = ("bytes", "csv", "image", "json", "notebook", "numpy", "parquet", "pdf", "svg", "text")


def format_names() -> tuple[str, ...]:
    return FORMAT_NAMES


def default_tolerance(settings: dict[str, Any]) -> Tolerance:
    """The project default from [tolerance] or compare's flags: numeric keys replace the built-in criteria."""
    base = Tolerance() if any(k in settings for k in NUMERIC_KEYS) else DEFAULT_TOLERANCE
    return base.overlay(settings)


def parse_rule_settings(table: dict[str, Any], where: str) -> dict[str, Any]:
    """Validate rule keys from config or CLI flags; raise ToleranceError with a message naming `where`."""
    out: dict[str, Any] = {}
    for name, value in table.items():
        if name in ("atol", "rtol", "digits"):
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ToleranceError(f"'{where}{name}' should be a number, found {type(value).__name__}")
            value = float(value)
            if math.isnan(value) or math.isinf(value) or value < 0:
                raise ToleranceError(f"'{where}{name}' should be a finite number >= 0, found {value}")
            out[name] = value
        elif name == "ulps":
            if isinstance(value, bool) or not isinstance(value, int) or value < 0 or value > 2**62:
                raise ToleranceError(f"'{where}ulps' should be a whole number >= 0, found {value!r}")
            out[name] = value
        elif name == "sign_free":
            if not isinstance(value, bool):
                raise ToleranceError(f"'{where}sign_free' should be true or false, found {value!r}")
            out[name] = value
        elif name in ("key", "ignore", "skip_lines", "mask"):
            items = [value] if isinstance(value, str) else value
            what = "column names" if name in ("key", "ignore") else "regular expressions"
            if not isinstance(items, list) or not all(isinstance(x, str) and x for x in items):
                raise ToleranceError(f"'{where}{name}' should be a list of {what}")
            if name in ("skip_lines", "mask"):
                for pattern in items:
                    try:
                        re.compile(pattern)
                    except re.error as exc:
                        raise ToleranceError(f"'{where}{name}' entry {pattern!r} is not a regular expression: "
                                             f"{exc}") from None
            out[name] = tuple(items)
        elif name == "channel_delta":
            if isinstance(value, bool) or not isinstance(value, int) or not 0 <= value <= 255:
                raise ToleranceError(f"'{where}channel_delta' should be a whole number from 0 to 255, "
                                     f"found {value!r}")
            out[name] = value
        elif name == "pixel_share":
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 <= value <= 1:
                raise ToleranceError(f"'{where}pixel_share' should be a fraction from 0 to 1, found {value!r}")
            out[name] = float(value)
        elif name == "record_only":
            if not isinstance(value, bool):
                raise ToleranceError(f"'{where}record_only' should be true or false, found {value!r}")
            out[name] = value
        elif name in ("severity", "whitespace", "format"):
            choices = {"severity": SEVERITY_NAMES, "whitespace": WHITESPACE_CHOICES,
                       "format": format_names()}[name]
            if value not in choices:
                raise ToleranceError(f"'{where}{name}' should be one of {', '.join(choices)}, found {value!r}")
            out[name] = value
        else:
            raise ToleranceError(f"'{where}{name}' is not a tolerance key")
    return out
