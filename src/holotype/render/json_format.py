"""Findings as the interface's JSON document."""

from __future__ import annotations

import json

from holotype.findings import Judgement


def render_json(report: Judgement) -> str:
    return json.dumps(report.to_dict(), indent=2, ensure_ascii=False, default=str) + "\n"
