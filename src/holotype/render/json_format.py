"""Findings as the interface's JSON document."""

from __future__ import annotations

import json

from holotype.findings import Report


def render_json(report: Report) -> str:
    return json.dumps(report.to_dict(), indent=2, ensure_ascii=False, default=str) + "\n"
