"""Run results in, Findings out: failures, outputs against their baselines, and two runs against each other."""

from __future__ import annotations

import re
from collections.abc import Callable
from pathlib import Path

from holotype.atomic import write_atomic
from holotype.compare import formats
from holotype.compare.outputs import compare_or_unreadable
from holotype.compare.source import Source
from holotype.errors import BaselineError, HolotypeError
from holotype.findings import Finding
from holotype.records import AnalysisRecord, RunResult
from holotype.store import BaselineStore
from holotype.tolerance import RuleBook, Tolerance

NONDETERMINISM_CAUSES = ("an unseeded random generator (use holotype.seeds.rng() or set seed_globals = true), "
                         "more than one BLAS/OpenMP thread (set threads = 1), iteration over a set or dict "
                         "of strings, or the time or date in the output")


def failure_finding(result: RunResult, root: Path) -> Finding:
    """An analysis that crashed, timed out or wrote no output: the error text and where its log is."""
    try:
        log = str(result.log.relative_to(root))
    except ValueError:
        log = str(result.log)
    where = f"log: {log}" if result.log_problem is None else f"no log: {result.log_problem}"
    return Finding("analysis", result.name, "analysis.failed", f"{result.failure_text()} ({where})")


def foreign_write_findings(result: RunResult) -> list[Finding]:
    """Outputs another analysis declares that changed while this one ran (and their owner did not)."""
    return [Finding("output", out, "output.foreign_write",
                    f"changed while '{result.name}' ran, but '{owner}' declares it: results would depend on the "
                    "order analyses run in; let one analysis write each file", owner, result.name)
            for out, owner in result.wrote_others]


def process_findings(result: RunResult) -> list[Finding]:
    """What a run did besides its outputs: files of other analyses changed, children left behind."""
    findings = foreign_write_findings(result)
    if result.left_children:
        findings.append(Finding("analysis", result.name, "analysis.left_children",
                                "processes it started were still running after it exited; holotype stopped them "
                                "(a daemon or a forgotten worker: what they would still have written is missing)"))
    return findings


def ran_finding(result: RunResult) -> Finding:
    return Finding("analysis", result.name, "analysis.ran", f"ran in {result.seconds:.1f}s with seed {result.seed}")


def picture_keeper(result: RunResult) -> Callable[[str, bytes], str]:
    """Where a difference picture of one of `result`'s outputs goes: beside the analysis' log."""

    def keep(output: str, picture: bytes) -> str:
        safe = re.sub(r"[^A-Za-z0-9._-]+", "_", output)
        path = result.log.with_name(f"{result.log.stem}.{safe}.difference.png")
        try:
            write_atomic(path, picture)
        except (OSError, HolotypeError) as exc:
            return f"(not written: {getattr(exc, 'strerror', None) or exc})"
        return str(path)

    return keep


def compare_with_baselines(record: AnalysisRecord, result: RunResult, store: BaselineStore,
                           rules: RuleBook) -> list[Finding]:
    """Each fresh output against its baseline, through the engine and the project's rules."""
    findings: list[Finding] = []
    for out, rec in sorted(record.outputs.items()):
        produced = result.outputs.get(out)
        if produced is None:
            findings.append(Finding("output", out, "output.missing", "not written by this run", rec.sha256, None))
            continue
        try:
            baseline = store.get(rec.sha256, rec.size)
        except BaselineError as exc:
            findings.append(Finding("output", out, "output.baseline", exc.detail, rec.sha256, None))
            continue
        expected = Source.from_bytes(baseline, out, f"baseline of {out}")
        actual = Source.from_bytes(produced.data, out, out)
        findings += compare_or_unreadable(out, expected, actual, rules, keep=picture_keeper(result))
    for out in result.outputs:
        if out not in record.outputs:
            findings.append(Finding("output", out, "output.extra", "declared now, no baseline recorded; "
                                    "run holotype adopt to take it", None, out))
    return findings


def _first_difference(finding: Finding) -> str:
    if finding.stats is not None and finding.stats.worst:
        return f"first differing value at {finding.stats.worst}: {finding.expected} then {finding.actual}"
    return finding.message


def compare_two_runs(first: RunResult, second: RunResult, rules: RuleBook | None = None) -> dict[str, Finding]:
    """Two fresh runs must agree exactly; one finding per output that differs (nondeterminism), by output.

    Exactly, apart from what the project's rules set aside on purpose: an output they mark `record_only`
    is not compared, and lines they skip or mask stay out of the comparison (a timestamp is not
    nondeterminism); every tolerance is zero."""
    findings: dict[str, Finding] = {}
    for out, produced in sorted(first.outputs.items()):
        again = second.outputs.get(out)
        if again is None or again.sha256 == produced.sha256:
            continue
        own = rules.for_output(out) if rules is not None else Tolerance()
        if own.record_only:
            continue
        comparer = formats.by_name(own.format) if own.format else formats.for_output(out)
        image = comparer is not None and "pixel_share" in comparer.honours
        exact = RuleBook(default=Tolerance(skip_lines=own.skip_lines, mask=own.mask, format=own.format,
                                           channel_delta=0 if image else None, pixel_share=0.0 if image else None))
        verdict = compare_or_unreadable(out, Source.from_bytes(produced.data, out, f"{out} (first run)"),
                                        Source.from_bytes(again.data, out, f"{out} (second run)"), exact)
        bad = [f for f in verdict if f.kind not in ("output.match", "output.layout")]
        if not bad:
            continue  # equal once what the rules set aside is left out, every value exactly
        shown = bad[0]
        findings[out] = (Finding("analysis", first.name, "analysis.nondeterministic",
                                f"nondeterministic: two runs with the same seed wrote different {out}; "
                                f"{_first_difference(shown)}. Likely causes: {NONDETERMINISM_CAUSES}",
                                shown.expected, shown.actual))
    return findings
