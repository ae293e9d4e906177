"""The closing line of every findings report: one verdict, then the count of each severity by its own word."""

from __future__ import annotations

CAVEAT = "a ranking of candidates, not proof"  # said wherever candidate causes of a moved output are shown

# the verdict words where "ok" would say too little
VERDICTS = {"compare": ("match", "differ"), "replay": ("reproduced", "not reproduced")}


def verdict_word(command: str, ok: bool) -> str:
    good, bad = VERDICTS.get(command, ("ok", "not ok"))
    return good if ok else bad


def counts_text(counts: dict[str, int]) -> str:
    return " · ".join(f"{counts.get(s, 0)} {s}" for s in ("fail", "warn", "info"))


def summary_line(command: str, counts: dict[str, int], *, verdict: bool = True) -> str:
    """For example 'reproduced · 0 fail · 0 warn · 3 info'; a plan (dry run) has no verdict."""
    if not verdict:
        return "plan only, nothing was run · " + counts_text(counts)
    return verdict_word(command, counts.get("fail", 0) == 0) + " · " + counts_text(counts)
