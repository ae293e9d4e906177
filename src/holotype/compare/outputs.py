"""Compare two outputs (or two folders of them) in their format, and turn the tallies into Findings."""

from __future__ import annotations

import math
import os
from collections.abc import Callable
from dataclasses import replace
from decimal import Decimal
from pathlib import Path

from holotype.compare import formats
from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.compare.tally import Tally
from holotype.errors import UnreadableOutput
from holotype.findings import Finding, OutputStats
from holotype.phrasing import listed
from holotype.tolerance import RuleBook


def _fmt(x: float) -> str:
    return f"{x:.3g}" if math.isfinite(x) else "∞"


def _value(v: object) -> str:
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, int) and not isinstance(v, bool) and abs(v) >= 10 ** 30:
        return f"{Decimal(v):.20e}"  # an integer of hundreds of digits, shown to 21 of them
    return repr(v) if isinstance(v, str) else str(v)


MAX_COLUMN_DETAILS = 200  # per-column figures kept in a finding: the columns that moved most


def _column_details(tallies: list[Tally]) -> tuple[dict[str, object], ...]:
    """Figures per column, for at most MAX_COLUMN_DETAILS columns (those outside tolerance first, worst first)."""
    if len(tallies) > MAX_COLUMN_DETAILS:
        tallies = sorted(tallies, key=lambda t: (-t.mismatches, -t.max_rel))[:MAX_COLUMN_DETAILS]
    return tuple(t.detail() for t in tallies)


def findings_from_outcome(output: str, outcome: Outcome) -> list[Finding]:
    """One finding for the output's values, plus one per shape problem and layout note."""
    findings: list[Finding] = []
    for p in outcome.problems:
        findings.append(Finding("output", output, p.kind, p.message, p.expected, p.actual))
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
        error_decades=total.sorted_decades(), columns=_column_details(outcome.tallies),
    )
    flip_text = f"; sign flipped as a whole in {', '.join(flipped)} (allowed: sign-free)" if flipped else ""
    hint_text = "".join(f"; {h}" for h in outcome.hints)
    if total.mismatches:
        failing = [t for t in outcome.tallies if t.mismatches]
        where = listed((t.name for t in failing), 4)
        message = (f"{total.mismatches:,} of {total.compared:,} values outside tolerance (in {where}); "
                   f"worst at {total.worst_where}: {_value(total.worst_expected)} recorded, "
                   f"{_value(total.worst_actual)} found; max abs err {_fmt(total.max_abs)}, "
                   f"max rel err {_fmt(total.max_rel)}, tolerance {tol_text}{flip_text}{hint_text}")
        findings.append(Finding("output", output, "output.mismatch", message, _value(total.worst_expected),
                                _value(total.worst_actual), stats=stats))
    else:
        message = (f"{total.compared:,} values within tolerance (max rel err {_fmt(total.max_rel)}, "
                   f"{total.min_lre:.1f} correct digits at worst; tolerance {tol_text}){flip_text}")
        findings.append(Finding("output", output, "output.match", message, stats=stats))
    return findings


FAILING_KINDS = frozenset({"output.mismatch", "output.shape", "output.unreadable"})


def _bytes_differ(expected: Source, actual: Source, why: str) -> list[Finding]:
    return [Finding("output", "", "output.mismatch", f"bytes differ ({why}; compared by SHA-256)",
                    expected.sha256(), actual.sha256(),
                    stats=OutputStats(compared=1, mismatches=1, tolerance="byte-equal"))]


_BINARY_CONTROLS = bytes(c for c in range(32) if c not in (9, 10, 12, 13, 27))  # all but tab, newlines, ESC


def _looks_like_text(src: Source) -> bool:
    """UTF-8 with no NUL and no control bytes other than tab, line breaks, form feed and ESC."""
    data = src.read_bytes()
    if data.translate(None, _BINARY_CONTROLS) != data:
        return False
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return True


Keep = Callable[[str, bytes], str]  # stores a difference picture for an output; returns where it went


def _judged(output: str, expected: Source, actual: Source, rules: RuleBook, keep: Keep | None) -> list[Finding]:
    tol = rules.for_output(output)
    sniffed = False
    if tol.format == "bytes":
        return _bytes_differ(expected, actual, "declared format = \"bytes\"")
    comparer = formats.by_name(tol.format) if tol.format else formats.for_output(output)
    if comparer is None:
        if not (_looks_like_text(expected) and _looks_like_text(actual)):
            return _bytes_differ(expected, actual, "no reader for this format, and not text")
        comparer, sniffed = formats.by_name("text"), True
        assert comparer is not None
    refused = formats.refused_keys(comparer, output, rules)
    if refused:
        return [Finding("output", output, "output.rule",
                        f"the rule key(s) {', '.join(refused)} cannot apply to {comparer.name} outputs; remove them "
                        "from the rules that match this output (nothing was compared)", refused, None)]
    outcome = comparer.compare(output, expected, actual, rules)
    if outcome.picture is not None:
        where = keep(output, outcome.picture) if keep is not None else None
        text = (f"; difference picture: {where}" if where else
                "; replay keeps a picture of the difference beside the analysis' log")
        outcome.problems = [replace(p, message=p.message + text) if p.kind == "output.mismatch" else p
                            for p in outcome.problems]
    if sniffed:
        outcome.notes.append("compared as text (sniffed): its suffix names no format, and its content is UTF-8 "
                             "without NUL or control bytes (declare format = \"bytes\" in a rule to compare its "
                             "bytes instead)")
    return findings_from_outcome(output, outcome)


def compare_sources(output: str, expected: Source, actual: Source, rules: RuleBook,
                    keep: Keep | None = None) -> list[Finding]:
    """Findings for one output: identical bytes short-circuit; otherwise its format's comparer decides.

    The format is the one a rule declares (`format`), else the suffix's, else text when the content is
    UTF-8 without NUL bytes (said in a note), else bytes. An output a rule marks `record_only` is not
    compared: a change is information. A rule's `severity` caps what a failing comparison counts as."""
    tol = rules.for_output(output)
    # files of different sizes cannot be identical: no need to read every byte of both to know it
    if expected.size() == actual.size() and expected.sha256() == actual.sha256():
        return [Finding("output", output, "output.match", "identical bytes",
                        stats=OutputStats(tolerance=tol.describe()))]
    if tol.record_only:
        return [Finding("output", output, "output.recorded_only",
                        "changed; recorded only, not compared (a rule sets record_only)",
                        expected.sha256(), actual.sha256())]
    found = [replace(f, subject=f.subject or output) for f in _judged(output, expected, actual, rules, keep)]
    if tol.severity is None:
        return found
    return [replace(f, ceiling=tol.severity, message=f"{f.message} (a rule counts a failure of this output as "
                                                      f"{tol.severity})")
            if f.kind in FAILING_KINDS else f for f in found]


def _files_under(folder: Path) -> dict[str, Path]:
    out: dict[str, Path] = {}
    for dirpath, dirnames, filenames in os.walk(folder):
        dirnames.sort()
        for name in filenames:
            full = Path(dirpath) / name
            if full.is_file():
                out[full.relative_to(folder).as_posix()] = full
    return out


def compare_paths(expected: Path, actual: Path, rules: RuleBook) -> list[Finding]:
    """Two files, or two folders paired by relative path (unpaired files are findings).

    A file that cannot be parsed raises UnreadableOutput (exit 2 for `compare`)."""
    if expected.is_dir() and actual.is_dir():
        e_files, a_files = _files_under(expected), _files_under(actual)
        findings: list[Finding] = []
        for rel in sorted(set(e_files) | set(a_files)):
            if rel not in a_files:
                findings.append(Finding("output", rel, "output.missing", f"only in {expected}", rel, None))
            elif rel not in e_files:
                findings.append(Finding("output", rel, "output.extra", f"only in {actual}", None, rel))
            else:
                findings += compare_sources(rel, Source.from_path(e_files[rel], rel),
                                            Source.from_path(a_files[rel], rel), rules)
        return findings
    name = actual.name if expected.name != actual.name else expected.name
    return compare_sources(name, Source.from_path(expected, name), Source.from_path(actual, name), rules)


def compare_or_unreadable(output: str, expected: Source, actual: Source, rules: RuleBook,
                          keep: Keep | None = None) -> list[Finding]:
    """For results being judged (replay, twice): an unparsable output is a failing finding, not an exit 2."""
    try:
        return compare_sources(output, expected, actual, rules, keep)
    except UnreadableOutput as exc:
        return [Finding("output", output, "output.unreadable", f"{exc.label}: {exc.reason}")]
