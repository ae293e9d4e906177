"""`holotype report`: a methods and provenance appendix for a thesis or paper, from the lock and the last rerun."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from holotype.baselines import STORE_FOLDER
from holotype.config import Config, load_config
from holotype.lockfile import LOCK_NAME, read_lock
from holotype.records import Lock

CAUTION = ("A reproduced number is not a correct number: holotype shows that these results did not drift "
           "beyond the stated tolerances when re-run, not that the analysis is sound. The lab's own data "
           "policies and ethics approvals still govern what may be recorded and shared.")


@dataclass
class OutputLine:
    analysis: str
    path: str
    sha256: str
    size: int
    tolerance: str
    result: str = "not rerun yet"
    max_rel_err: float | None = None
    rtol: float | None = None
    ok: bool | None = None


@dataclass
class Provenance:
    """Everything the appendix states, gathered once; renderers only lay it out."""

    lock: Lock
    config: Config
    outputs: list[OutputLine] = field(default_factory=list)
    last_rerun_when: str | None = None
    last_rerun_ok: bool | None = None


def _tolerance_text(tol: dict[str, Any]) -> str:
    parts = ["sign-free" if v is True else f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}"
             for k, v in sorted(tol.items()) if v is not False]
    return ", ".join(parts) or "exact"


def gather_provenance(root: Path) -> Provenance:
    root = Path(root)
    lock = read_lock(root / LOCK_NAME)
    config = load_config(root, required=False)
    prov = Provenance(lock, config)
    last: dict[str, Any] = {}
    try:
        last = json.loads((root / STORE_FOLDER / "last-rerun.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        last = {}
    by_output = {f.get("subject"): f for f in last.get("findings", []) if f.get("area") == "output"}
    failed_analyses = {f.get("subject"): f for f in last.get("findings", []) if f.get("kind") == "analysis.failed"}
    if last:
        prov.last_rerun_when = str(last.get("when", ""))
        prov.last_rerun_ok = bool(last.get("ok"))
    for name in sorted(lock.analyses):
        rec = lock.analyses[name]
        for out in sorted(rec.outputs):
            o = rec.outputs[out]
            line = OutputLine(name, out, o.sha256, o.size, _tolerance_text(o.tolerance),
                              rtol=o.tolerance.get("rtol") if isinstance(o.tolerance.get("rtol"), float) else None)
            f = by_output.get(out)
            if name in failed_analyses:
                line.result, line.ok = "analysis failed in the last rerun", False
            elif f is not None:
                line.ok = f.get("severity") != "fail"
                line.result = str(f.get("message", ""))
                err = f.get("max_rel_err")
                line.max_rel_err = float(err) if isinstance(err, (int, float)) else (
                    float("inf") if err == "inf" else None)
            prov.outputs.append(line)
    return prov


def build_report(root: Path, fmt: str = "markdown") -> str:
    prov = gather_provenance(root)
    if fmt == "html":
        from holotype.render.methods_html import render_methods_html

        return render_methods_html(prov)
    from holotype.render.methods_markdown import render_methods_markdown

    return render_methods_markdown(prov)
