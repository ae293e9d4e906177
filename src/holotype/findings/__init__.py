"""Findings: the one list every command produces, and the policy that sets their severity."""

from holotype.findings.finding import AREAS, Finding, Judgement, OutputStats, json_number

__all__ = ["AREAS", "Finding", "OutputStats", "Judgement", "json_number"]
