"""Compare two outputs (or two folders of them) in their format, and turn the tallies into Findings."""

from __future__ import annotations

import math
import os
from collections.abc import Callable
from pathlib import Path

from holotype.compare.source import Source, UnreadableOutput
from holotype.compare.tables import TableOutcome, compare_tables
from holotype.compare.tally import Tally
from holotype.compare.tolerance import RuleBook
from holotype.findings import Finding, OutputStats

Comparer = Callable[[str, Source, Source, RuleBook], TableOutcome]


def _arrays(output: str, e: Source, a: Source, rules: RuleBook) -> TableOutcome:
    from holotype.compare.arrays import compare_arrays

    return compare_arrays(output, e, a, rules)


def _json(output: str, e: Source, a: Source, rules: RuleBook) -> TableOutcome:
    from holotype.compare.jsondoc import compare_json

    return compare_json(output, e, a, rules)


def _text(output: str, e: Source, a: Source, rules: RuleBook) -> TableOutcome:
    from holotype.compare.text import compare_text

    return compare_text(output, e, a, rules)


def _parquet(output: str, e: Source, a: Source, rules: RuleBook) -> TableOutcome:
    from holotype.compare.parquet import compare_parquet

    return compare_parquet(output, e, a, rules)


FORMATS: dict[str, Comparer] = {
    ".csv": compare_tables, ".tsv": compare_tables, ".tab": compare_tables,
    ".json": _json,
    ".npy": _arrays, ".npz": _arrays,
    ".txt": _text, ".log": _text, ".out": _text, ".text": _text,
    ".parquet": _parquet, ".pq": _parquet,
}


def _fmt(x: float) -> str:
    return f"{x:.3g}" if math.isfinite(x) else "∞"


def _value(v: object) -> str:
    if isinstance(v, float):
        return repr(v)
    return repr(v) if isinstance(v, str) else str(v)


def findings_from_outcome(output: str, outcome: TableOutcome) -> list[Finding]:
    """One finding for the output's values, plus one per shape problem and layout note."""
    findings: list[Finding] = []
    for kind, message, expected, actual in outcome.problems:
        findings.append(Finding("output", output, kind, message, expected, actual))
    for note in outcome.notes:
        findings.append(Finding("output", output, "output.layout", note))
    if not outcome.tallies:
        return findings
    total = Tally("all", outcome.tallies[0].tolerance)
    for t in outcome.tallies:
        total.merge(t)
    tolerances = sorted({t.tolerance.describe() for t in outcome.tallies})
    tol_text = tolerances[0] if len(tolerances) == 1 else "per column: " + "; ".join(tolerances)
    flipped = [t.name for t in outcome.tallies if t.sign_flipped]
    stats = OutputStats(
        compared=total.compared, mismatches=total.mismatches, max_abs_err=total.max_abs, max_rel_err=total.max_rel,
        worst=total.worst_where, min_lre=round(total.min_lre, 2), tolerance=tol_text,
        error_decades=total.sorted_decades(), columns=tuple(t.detail() for t in outcome.tallies),
    )
    flip_text = f"; sign flipped as a whole in {', '.join(flipped)} (allowed: sign-free)" if flipped else ""
    if total.mismatches:
        failing = [t for t in outcome.tallies if t.mismatches]
        where = ", ".join(t.name for t in failing[:4]) + (f" and {len(failing) - 4} more" if len(failing) > 4 else "")
        message = (f"{total.mismatches:,} of {total.compared:,} values outside tolerance (in {where}); "
                   f"worst at {total.worst_where}: {_value(total.worst_expected)} recorded, "
                   f"{_value(total.worst_actual)} found; max abs err {_fmt(total.max_abs)}, "
                   f"max rel err {_fmt(total.max_rel)}, tolerance {tol_text}{flip_text}")
        findings.append(Finding("output", output, "output.mismatch", message, _value(total.worst_expected),
                                _value(total.worst_actual), stats=stats))
    else:
        message = (f"{total.compared:,} values within tolerance (max rel err {_fmt(total.max_rel)}, "
                   f"{total.min_lre:.1f} correct digits at worst; tolerance {tol_text}){flip_text}")
        findings.append(Finding("output", output, "output.match", message, stats=stats))
    return findings


def compare_sources(output: str, expected: Source, actual: Source, rules: RuleBook) -> list[Finding]:
    """Findings for one output: identical bytes short-circuit; otherwise its format's comparer decides."""
    if expected.sha256() == actual.sha256():
        return [Finding("output", output, "output.match", "identical bytes",
                        stats=OutputStats(tolerance=rules.for_output(output).describe()))]
    suffix = os.path.splitext(output)[1].lower()
    comparer = FORMATS.get(suffix)
    if comparer is None:
        return [Finding("output", output, "output.mismatch",
                        "bytes differ (no numeric reader for this format; compared by SHA-256)",
                        expected.sha256(), actual.sha256(), stats=OutputStats(compared=1, mismatches=1))]
    return findings_from_outcome(output, comparer(output, expected, actual, rules))


def _files_under(folder: Path) -> dict[str, Path]:
    out: dict[str, Path] = {}
    for dirpath, dirnames, filenames in os.walk(folder):
        dirnames.sort()
        for name in filenames:
            full = Path(dirpath) / name
            if full.is_file():
                out[full.relative_to(folder).as_posix()] = full
    return out


def compare_paths(expected: Path, actual: Path, rules: RuleBook,
                  on_unreadable: Callable[[UnreadableOutput], list[Finding]] | None = None) -> list[Finding]:
    """Two files, or two folders paired by relative path (unpaired files are findings)."""
    if expected.is_dir() and actual.is_dir():
        e_files, a_files = _files_under(expected), _files_under(actual)
        findings: list[Finding] = []
        for rel in sorted(set(e_files) | set(a_files)):
            if rel not in a_files:
                findings.append(Finding("output", rel, "output.missing", f"only in {expected}", rel, None))
            elif rel not in e_files:
                findings.append(Finding("output", rel, "output.extra", f"only in {actual}", None, rel))
            else:
                findings += _compare_one(rel, e_files[rel], a_files[rel], rules, on_unreadable)
        return findings
    name = actual.name if expected.name != actual.name else expected.name
    return _compare_one(name, expected, actual, rules, on_unreadable)


def _compare_one(name: str, e: Path, a: Path, rules: RuleBook,
                 on_unreadable: Callable[[UnreadableOutput], list[Finding]] | None) -> list[Finding]:
    try:
        return compare_sources(name, Source.from_path(e, name), Source.from_path(a, name), rules)
    except UnreadableOutput as exc:
        if on_unreadable is None:
            raise
        return on_unreadable(exc)
