"""`holotype report`: a methods and provenance appendix for a thesis or paper, from the lock and the last replay."""

from __future__ import annotations

from fnmatch import fnmatchcase
from pathlib import Path
from typing import Any

from holotype.appendix import OutputLine, Provenance
from holotype.config import load_config
from holotype.errors import HolotypeError
from holotype.findings.summary import summary_line
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.safe_files import read_regular
from holotype.store import ProjectStore
from holotype.tolerance import RuleBook, Tolerance


def tolerance_text(rules: RuleBook, output: str, recorded: dict[str, Any]) -> str:
    """The criteria that judged `output`: the recorded whole-output tolerance, then column rules that match it."""
    text = Tolerance.from_summary(recorded).describe() if recorded else rules.for_output(output).describe()
    columns = [f"{r.column_glob}: {rules.default.overlay(r.settings).describe()}"
               for r in rules.rules if r.column_glob is not None and fnmatchcase(output, r.output_glob)]
    return text + ("; " + "; ".join(columns) if columns else "")


PICTURE_LIMIT = 32 << 20  # the largest difference picture the HTML report embeds


def _picture(root: Path, message: str) -> bytes | None:
    """The difference picture a replay finding names, when it is still in this project's logs."""
    marker = "difference picture: "
    if marker not in message:
        return None
    path = Path(message.split(marker, 1)[1].split(";")[0].strip())
    logs = (root / ".holotype" / "logs").resolve()
    try:
        if path.resolve().parent != logs:
            return None
        return read_regular(path, limit=PICTURE_LIMIT)
    except (OSError, HolotypeError):
        return None


def gather_provenance(root: Path) -> Provenance:
    root = Path(root)
    lock = read_lock(root / LOCK_NAME)
    config = load_config(root, required=False)
    prov = Provenance(lock, threads=config.threads, seed_globals=config.seed_globals)
    last = ProjectStore(root).last_replay()
    found = [f for f in last.get("findings", []) if isinstance(f, dict)]
    by_output = {f.get("subject"): f for f in found if f.get("area") == "output"}
    failed_analyses = {f.get("subject") for f in found if f.get("kind") == "analysis.failed"}
    if last:
        counts = {s: sum(1 for f in found if f.get("severity") == s) for s in ("fail", "warn", "info")}
        prov.last_replay_when = str(last.get("when", ""))
        prov.last_replay_ok = counts["fail"] == 0
        prov.last_replay_summary = summary_line("replay", counts)
    for name in sorted(lock.analyses):
        rec = lock.analyses[name]
        for out in sorted(rec.outputs):
            o = rec.outputs[out]
            rtol = o.tolerance.get("rtol")
            line = OutputLine(name, out, o.sha256, o.size, tolerance_text(config.rulebook, out, o.tolerance),
                              rtol=rtol if isinstance(rtol, float) else None)
            f = by_output.get(out)
            if name in failed_analyses:
                line.result, line.ok = "analysis failed in the last replay", False
            elif f is not None:
                line.ok = f.get("severity") != "fail"
                line.result = str(f.get("message", ""))
                line.candidates = tuple(str(c) for c in f.get("candidates") or ())
                line.by_bytes = f.get("tolerance") == "byte-equal"
                line.picture = _picture(root, line.result)
                err = f.get("max_rel_err")
                if not line.by_bytes:
                    line.max_rel_err = float(err) if isinstance(err, (int, float)) else (
                        float("inf") if err == "inf" else None)
            prov.outputs.append(line)
    return prov


def build_report(root: Path, fmt: str = "markdown") -> str:
    """The appendix as Markdown or one self-contained HTML file."""
    from holotype.render import appendix_renderer

    return appendix_renderer(fmt)(gather_provenance(root))
