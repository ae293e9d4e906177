"""Vector figures: SVG as text with its volatile parts set aside, PDF by bytes with its dates and ids set aside.

Figures carry their creation date and document ids (and matplotlib SVGs random clip-path ids unless
`svg.hashsalt` is set, which holotype's start-up hook does). holotype gives every run the record's
SOURCE_DATE_EPOCH, so most figures come out byte-identical; when they do not, these parts never decide.

- SVG: compared as text (coordinates numerically, with the tolerance), with `<dc:date>`, `id="…"` and
  references to ids (`url(#…)`, `href="#…"`) masked.
- PDF: the drawing streams are compressed, so they cannot be compared numerically; the bytes are compared
  with `/CreationDate`, `/ModDate`, `/ID` and the XMP dates and document ids masked. A PDF that still
  differs is said plainly, with the rule that would count it as a warning.
"""

from __future__ import annotations

import re

from holotype.compare.formats import register
from holotype.compare.formats.text import TEXT_HONOURS, compare_text
from holotype.compare.outcome import Outcome
from holotype.compare.source import Source
from holotype.errors import UnreadableOutput
from holotype.tolerance import RuleBook

SVG_MASKS = (
    re.compile(r"<dc:date>.*?</dc:date>"),
    re.compile(r"\bid=\"[^\"]*\""),
    re.compile(r"url\(#[^)]*\)"),
    re.compile(r"href=\"#[^\"]*\""),
)
PDF_MASKS = (
    re.compile(rb"/(?:CreationDate|ModDate)\s*\((?:[^()\\]|\\.)*\)"),
    re.compile(rb"/ID\s*\[\s*<[0-9A-Fa-f]*>\s*<[0-9A-Fa-f]*>\s*\]"),
    re.compile(rb"<(xmp:CreateDate|xmp:ModifyDate|xmp:MetadataDate|xmpMM:DocumentID|xmpMM:InstanceID)>"
               rb"[^<]*</\1>"),
)


class SvgFormat:
    name: str = "svg"
    suffixes: tuple[str, ...] = (".svg",)
    honours: frozenset[str] = TEXT_HONOURS

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        outcome = compare_text(output, expected, actual, rules, extra_masks=SVG_MASKS)
        outcome.notes.append("SVG compared as text: dates and element ids set aside, coordinates numerically")
        return outcome


def _masked(data: bytes) -> bytes:
    for pattern in PDF_MASKS:
        data = pattern.sub(b"<set aside>", data)
    return data


class PdfFormat:
    name: str = "pdf"
    suffixes: tuple[str, ...] = (".pdf",)
    honours: frozenset[str] = frozenset()

    def compare(self, output: str, expected: Source, actual: Source, rules: RuleBook) -> Outcome:
        outcome = Outcome()
        e, a = expected.read_bytes(), actual.read_bytes()
        for data, src in ((e, expected), (a, actual)):
            if not data.startswith(b"%PDF-"):
                raise UnreadableOutput("not a PDF (no %PDF- header)", src.label)
        if _masked(e) == _masked(a):
            outcome.problem("output.match", "the same PDF apart from its creation dates and document ids")
        else:
            outcome.problem("output.mismatch",
                            "the PDF's content differs, not only its dates and ids (its drawing is compressed, so it "
                            "cannot be compared numerically); to count this figure as a warning add a rule "
                            f"{{ match = \"{output}\", severity = \"warn\" }}, or save it as PNG too for a pixel "
                            "comparison", expected.sha256()[:12], actual.sha256()[:12])
        return outcome


register(SvgFormat())
register(PdfFormat())
