"""The recorded judgement against the current one: a tolerance, rule, thread pin, seeding or policy that
changed. Loosening (a larger tolerance, a criterion added, a rule that now reaches more, `threads` or
`seed_globals` removed, a failure downgraded) is a failure by default; tightening is a warning."""

from __future__ import annotations

from typing import Any

from holotype.config import Config
from holotype.findings import Finding
from holotype.findings.policy import DEFAULT_SEVERITY, SEVERITY_ORDER
from holotype.records import JudgementRecord, RuleRecord
from holotype.tolerance import IMAGE_DEFAULTS, NUMERIC_KEYS, Rule, RuleBook, Tolerance, default_tolerance


def judgement_of(default: Tolerance, rules: tuple[Rule, ...], threads: int | None, seed_globals: bool,
                 policy: dict[str, str]) -> JudgementRecord:
    """The record of a configuration's judgement (what `record` writes)."""
    return JudgementRecord(tolerance=default.summary(),
                           rules=tuple(RuleRecord(r.match, _settings(r.settings)) for r in rules),
                           threads=threads, seed_globals=seed_globals, policy=dict(sorted(policy.items())))


def _settings(settings: dict[str, Any]) -> dict[str, Any]:
    return {k: list(v) if isinstance(v, tuple) else v for k, v in sorted(settings.items())}


def rulebook_of(record: JudgementRecord) -> RuleBook:
    def parsed(settings: dict[str, Any]) -> dict[str, Any]:
        return {k: tuple(v) if isinstance(v, list) else v for k, v in settings.items()}

    return RuleBook(default=default_tolerance(parsed(record.tolerance)),
                    rules=tuple(Rule(r.match, parsed(r.settings)) for r in record.rules))


def _direction(a: Tolerance, b: Tolerance) -> tuple[list[str], list[str]]:
    """(how b is looser than a, how b is tighter than a), in words."""
    looser: list[str] = []
    tighter: list[str] = []
    for key in NUMERIC_KEYS:
        x, y = getattr(a, key), getattr(b, key)
        if x == y:
            continue
        if x is None:  # any criterion that passes is enough: one more can only let more through
            looser.append(f"{key} added ({y:g})")
        elif y is None:
            tighter.append(f"{key} removed (was {x:g})")
        elif (y > x) != (key == "digits"):  # more digits demanded is stricter
            looser.append(f"{key} {x:g} → {y:g}")
        else:
            tighter.append(f"{key} {x:g} → {y:g}")
    if b.sign_free and not a.sign_free:
        looser.append("sign_free added")
    elif a.sign_free and not b.sign_free:
        tighter.append("sign_free removed")
    for key in ("ignore", "skip_lines", "mask"):  # each entry leaves more out of the comparison
        before, after = set(getattr(a, key)), set(getattr(b, key))
        if after - before:
            looser.append(f"{key} adds {', '.join(sorted(after - before))}")
        if before - after:
            tighter.append(f"{key} drops {', '.join(sorted(before - after))}")
    if (a.whitespace == "exact") != (b.whitespace == "exact"):
        (tighter if b.whitespace == "exact" else looser).append(
            f"whitespace {a.whitespace or 'any'} → {b.whitespace or 'any'}")
    for key, default in (("channel_delta", IMAGE_DEFAULTS[0]), ("pixel_share", IMAGE_DEFAULTS[1])):
        x, y = getattr(a, key), getattr(b, key)
        x, y = default if x is None else x, default if y is None else y
        if y != x:
            (looser if y > x else tighter).append(f"{key} {x:g} → {y:g}")
    if b.record_only != a.record_only:
        (looser if b.record_only else tighter).append(f"record_only {'added' if b.record_only else 'removed'}")
    rank = {"fail": 0, "warn": 1, "info": 2}
    x_sev, y_sev = rank[a.severity or "fail"], rank[b.severity or "fail"]
    if x_sev != y_sev:
        (looser if y_sev > x_sev else tighter).append(f"severity {a.severity or 'fail'} → {b.severity or 'fail'}")
    if a.format != b.format:  # read another way: may let more through, unless it is now compared by its bytes
        (tighter if b.format == "bytes" else looser).append(f"format {a.format or 'by suffix'} → "
                                                            f"{b.format or 'by suffix'}")
    return looser, tighter


def compare_judgement(old: JudgementRecord | None, new: JudgementRecord | None, outputs: list[str],
                      then: str = "recorded", now: str = "now") -> list[Finding]:
    """Findings of kind judgement.loosened / judgement.tightened / judgement.changed."""
    if old is None or new is None:
        return []
    findings: list[Finding] = []
    before, after = rulebook_of(old), rulebook_of(new)
    globs = {r.column_glob for r in (*before.rules, *after.rules) if r.column_glob}
    for out in sorted(outputs):
        units = [(out, None)] + [(out, g) for g in sorted(globs)]
        for output, column in units:
            if column is None:
                a, b = before.for_output(output), after.for_output(output)
            else:
                a, b = before.for_column(output, column), after.for_column(output, column)
                if a == before.for_output(output) and b == after.for_output(output):
                    continue  # no column rule reaches this output: already judged as a whole
            looser, tighter = _direction(a, b)
            where = output if column is None else f"{output}:{column}"
            if looser:
                findings.append(Finding("judgement", where, "judgement.loosened",
                                        f"tolerance looser than {then}: {'; '.join(looser)} ({a.describe()} → "
                                        f"{b.describe()})", a.describe(), b.describe()))
            elif tighter:
                findings.append(Finding("judgement", where, "judgement.tightened",
                                        f"tolerance tighter than {then}: {'; '.join(tighter)}",
                                        a.describe(), b.describe()))
            elif a.key != b.key:
                findings.append(Finding("judgement", where, "judgement.changed",
                                        f"rows matched by {list(a.key) or 'position'} {then}, by "
                                        f"{list(b.key) or 'position'} {now}", list(a.key), list(b.key)))
    if old.threads != new.threads:
        kind = "judgement.loosened" if new.threads is None else "judgement.tightened" if old.threads is None \
            else "judgement.changed"
        findings.append(Finding("judgement", "threads", kind, f"threads = {old.threads} {then}, "
                                f"{new.threads if new.threads is not None else 'not set'} {now}",
                                old.threads, new.threads))
    if old.seed_globals != new.seed_globals:
        kind = "judgement.loosened" if old.seed_globals else "judgement.tightened"
        findings.append(Finding("judgement", "seed_globals", kind,
                                f"seed_globals = {str(old.seed_globals).lower()} {then}, "
                                f"{str(new.seed_globals).lower()} {now}", old.seed_globals, new.seed_globals))
    for finding_kind in sorted(set(old.policy) | set(new.policy)):
        a_sev = old.policy.get(finding_kind, DEFAULT_SEVERITY.get(finding_kind, "fail"))
        b_sev = new.policy.get(finding_kind, DEFAULT_SEVERITY.get(finding_kind, "fail"))
        if a_sev == b_sev:
            continue
        kind = "judgement.loosened" if SEVERITY_ORDER[b_sev] > SEVERITY_ORDER[a_sev] else "judgement.tightened"
        findings.append(Finding("judgement", f"policy.{finding_kind}", kind,
                                f"'{finding_kind}' is {a_sev} {then}, {b_sev} {now}", a_sev, b_sev))
    return findings


def config_judgement(config: Config) -> JudgementRecord:
    return judgement_of(config.rulebook.default, config.rulebook.rules, config.threads, config.seed_globals,
                        config.policy)
