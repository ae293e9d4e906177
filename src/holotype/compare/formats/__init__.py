"""Output formats: one comparer per format, registered by suffix and by name.

A comparer is a small object with a `name`, the `suffixes` it claims, the rule keys it
`honours` among STRUCTURAL_KEYS, and `compare(output, expected, actual, rules)`
returning an `Outcome`. A rule key set for an output whose format does not honour it is
refused with a finding, never silently ignored. A new format is a new module here, listed
in `_MODULES`.
"""

from __future__ import annotations

import importlib
import os
from fnmatch import fnmatchcase
from typing import Protocol

from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.tolerance import RuleBook

# rule keys only some formats can honour (the numeric keys, format, record_only and severity apply to all)
STRUCTURAL_KEYS = ("key", "ignore", "sign_free", "skip_lines", "mask", "whitespace", "channel_delta", "pixel_share")


class FormatComparer(Protocol):
    name: str
    suffixes: tuple[str, ...]
    honours: frozenset[str]

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome: ...


_MODULES = ("table", "json", "arrays", "text", "parquet", "image", "figures", "notebook")
_BY_NAME: dict[str, FormatComparer] = {}
_BY_SUFFIX: dict[str, FormatComparer] = {}


def register(comparer: FormatComparer) -> FormatComparer:
    """Add a comparer under its name and suffixes (a later registration of a suffix wins)."""
    _BY_NAME[comparer.name] = comparer
    for suffix in comparer.suffixes:
        _BY_SUFFIX[suffix] = comparer
    return comparer


_loaded: list[bool] = []  # every module imported once (one imported directly registers only itself)


def _load() -> None:
    if not _loaded:
        for module in _MODULES:
            importlib.import_module(f"holotype.compare.formats.{module}")
        _loaded.append(True)


def by_name(name: str) -> FormatComparer | None:
    _load()
    return _BY_NAME.get(name)


def names() -> list[str]:
    _load()
    return sorted(_BY_NAME)


def for_output(output: str) -> FormatComparer | None:
    """The comparer for an output path, by its suffix; None means compare bytes."""
    _load()
    return _BY_SUFFIX.get(os.path.splitext(output)[1].lower())


def _is_set(value: object) -> bool:
    return value is not None and value is not False and value != ()


def refused_keys(comparer: FormatComparer, output: str, rules: RuleBook) -> list[str]:
    """The structural rule keys set for `output` that its format cannot honour."""
    tol = rules.for_output(output)
    columns = [r.settings for r in rules.rules if r.column_glob is not None and fnmatchcase(output, r.output_glob)]
    set_keys = {k for k in STRUCTURAL_KEYS if _is_set(getattr(tol, k))}
    for settings in columns:
        set_keys |= {k for k in STRUCTURAL_KEYS if _is_set(settings.get(k))}
    return sorted(k for k in set_keys if k not in comparer.honours)
