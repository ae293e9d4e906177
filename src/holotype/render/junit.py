"""Findings as JUnit XML: one test suite per area, one test case per subject, a <failure> per failing finding."""

from __future__ import annotations

import xml.etree.ElementTree as ET

from holotype.findings import AREAS, Finding, Judgement
from holotype.findings.summary import CAVEAT


def render_junit(report: Judgement) -> str:
    """JUnit XML that CI systems display natively; every user-controlled string is escaped by ElementTree."""
    root = ET.Element("testsuites", name=f"holotype {report.command}")
    by_area: dict[str, dict[str, list[Finding]]] = {}
    for f in report.findings:
        by_area.setdefault(f.area, {}).setdefault(f.subject, []).append(f)
    total_tests = total_failures = 0
    for area in sorted(by_area, key=lambda a: AREAS.index(a) if a in AREAS else len(AREAS)):
        subjects = by_area[area]
        failures = sum(1 for fs in subjects.values() for f in fs if f.severity == "fail")
        suite = ET.SubElement(root, "testsuite", name=area, tests=str(len(subjects)), failures=str(failures),
                              errors="0", skipped="0")
        total_tests += len(subjects)
        total_failures += failures
        for subject in sorted(subjects):
            case = ET.SubElement(suite, "testcase", classname=f"holotype.{report.command}.{area}", name=subject)
            notes = []
            for f in subjects[subject]:
                if f.severity == "fail":
                    failure = ET.SubElement(case, "failure", message=f.message, type=f.kind)
                    failure.text = _detail(f)
                else:
                    notes.append(f"[{f.severity}] {f.message}")
            if notes:
                props = ET.SubElement(case, "properties")
                for i, f in enumerate(x for x in subjects[subject] if x.severity != "fail"):
                    ET.SubElement(props, "property", name=f"{f.severity}.{i}", value=f.message)
                out = ET.SubElement(case, "system-out")
                out.text = "\n".join(notes)
    # one passing case that says the command ran, so a clean run is not an empty report
    summary = ET.SubElement(root, "testsuite", name="holotype", tests="1", failures="0", errors="0", skipped="0")
    done = ET.SubElement(summary, "testcase", classname=f"holotype.{report.command}", name="completed")
    ET.SubElement(done, "system-out").text = "\n".join(report.notes) or f"holotype {report.command} completed"
    total_tests += 1
    root.set("tests", str(total_tests))
    root.set("failures", str(total_failures))
    ET.indent(root)
    return ET.tostring(root, encoding="unicode", xml_declaration=True) + "\n"


def _detail(f: Finding) -> str:
    lines = [f.message]
    if f.expected is not None or f.actual is not None:
        lines.append(f"expected: {f.expected}")
        lines.append(f"actual: {f.actual}")
    if f.stats is not None and f.stats.worst:
        lines.append(f"worst: {f.stats.worst}")
    if f.candidates:
        lines.append(f"what may have moved it ({CAVEAT}):")
        lines += [f"  {i}. {c}" for i, c in enumerate(f.candidates, start=1)]
    return "\n".join(lines)
