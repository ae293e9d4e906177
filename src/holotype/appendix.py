"""Plain data for the methods appendix (`holotype report`): gathered by the command, laid out by renderers."""

from __future__ import annotations

from dataclasses import dataclass, field

from holotype.records import LockContents

CAUTION = ("A reproduced number is not a correct number: holotype shows that these results did not drift "
           "beyond the stated tolerances when re-run, not that the analysis is sound. The lab's own data "
           "policies and ethics approvals still govern what may be recorded and shared.")


@dataclass
class OutputLine:
    analysis: str
    path: str
    sha256: str
    size: int
    tolerance: str  # the criteria that applied: the whole-output rule and any column rules
    result: str = "not replayed yet"
    max_rel_err: float | None = None
    rtol: float | None = None
    ok: bool | None = None
    by_bytes: bool = False  # compared byte for byte (no reader for the format)
    candidates: tuple[str, ...] = ()  # for an output the latest replay did not reproduce exactly
    picture: bytes | None = None  # PNG: where an image output differed in the latest replay


@dataclass
class Provenance:
    """Everything the appendix states, gathered once; renderers only lay it out."""

    lock: LockContents
    threads: int | None = None
    seed_globals: bool = False
    outputs: list[OutputLine] = field(default_factory=list)
    last_replay_when: str | None = None
    last_replay_ok: bool | None = None
    last_replay_summary: str | None = None  # e.g. "reproduced · 0 fail · 0 warn · 3 info"

    @property
    def last_replay_text(self) -> str:
        """'<when>: <verdict in words> (<summary line>)' for the appendix."""
        words = "all outputs reproduced within tolerance" if self.last_replay_ok else "NOT reproduced"
        return f"{self.last_replay_when}: {words} ({self.last_replay_summary})"
