"""The provenance appendix as one self-contained HTML file, with an inline SVG chart per analysis."""

from __future__ import annotations

import base64
import math
from html import escape

from holotype import __version__
from holotype.appendix import CAUTION, OutputLine, Provenance
from holotype.findings.summary import CAVEAT
from holotype.render.methods_markdown import numeric_lines, run_settings

STYLE = """
body { font-family: Georgia, 'Times New Roman', serif; max-width: 52em; margin: 2em auto; color: #111;
       line-height: 1.4 }
table { border-collapse: collapse; margin: 0.5em 0 1.5em; font-size: 0.9em }
th, td { border-bottom: 1px solid #999; padding: 0.2em 0.6em; text-align: left; vertical-align: top }
code { font-size: 0.85em; word-break: break-all }
.caution { border-left: 3px solid #333; padding-left: 1em }
@media print { body { margin: 0; max-width: none } svg { break-inside: avoid } }
"""

LOW, HIGH = -17, 1  # decades shown on the error axis


def short_label(path: str, width: int = 34) -> str:
    """A path that fits the chart's label column: the file name kept whole, folders shortened in the middle."""
    if len(path) <= width:
        return path
    head, _, name = path.rpartition("/")
    if len(name) + 2 >= width or not head:
        return name[: width - 1] + "…" if len(name) > width else name
    room = width - len(name) - 2
    return head[:room] + "…/" + name


class ErrorChart:
    """Each output's largest relative error against its tolerance, log scale; shapes, not colours, carry meaning."""

    def __init__(self, analysis: str, lines: list[OutputLine]) -> None:
        self.analysis = analysis
        self.lines = lines

    @staticmethod
    def _x(value: float, left: int, width: int) -> float:
        if value <= 0:
            return left
        d = min(max(math.log10(value), LOW), HIGH)
        return left + (d - LOW) / (HIGH - LOW) * width

    def svg(self) -> str:
        left, width, row = 190, 420, 26
        height = 40 + row * len(self.lines)
        parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="640" height="{height}" role="img" '
                 f'aria-label="largest relative error per output of {escape(self.analysis)}">',
                 f'<text x="4" y="14" font-size="12" font-weight="bold">{escape(self.analysis)}: largest relative '
                 'error (dot) and tolerance (bar), log scale</text>']
        for d in range(LOW, HIGH + 1, 3):
            x = self._x(10.0 ** d, left, width)
            parts.append(f'<line x1="{x:.1f}" y1="22" x2="{x:.1f}" y2="{height - 14}" stroke="#ccc"/>')
            parts.append(f'<text x="{x:.1f}" y="{height - 2}" font-size="9" text-anchor="middle">1e{d}</text>')
        for i, line in enumerate(self.lines):
            y = 34 + i * row
            parts.append(f'<text x="4" y="{y + 4}" font-size="10"><title>{escape(line.path)}</title>'
                         f'{escape(short_label(line.path))}</text>')
            if line.rtol:
                tx = self._x(line.rtol, left, width)
                parts.append(f'<line x1="{tx:.1f}" y1="{y - 8}" x2="{tx:.1f}" y2="{y + 8}" stroke="#000" '
                             'stroke-width="2"/>')
            if line.max_rel_err is None:
                text = ("byte for byte: " + ("identical" if line.ok else "bytes differ")) if line.by_bytes \
                    else line.result[:60]
                parts.append(f'<text x="{left}" y="{y + 4}" font-size="10" font-style="italic">'
                             f'{escape(text)}</text>')
                continue
            x = self._x(line.max_rel_err, left, width) if math.isfinite(line.max_rel_err) else left + width
            shape = (f'<circle cx="{x:.1f}" cy="{y}" r="4" fill="#000"/>' if line.ok else
                     f'<path d="M{x - 5:.1f},{y - 5} L{x + 5:.1f},{y + 5} M{x - 5:.1f},{y + 5} L{x + 5:.1f},{y - 5}" '
                     'stroke="#000" stroke-width="2"/>')
            label = "exact" if line.max_rel_err == 0 else f"{line.max_rel_err:.1e}"
            parts.append(shape + f'<text x="{left + width + 8}" y="{y + 4}" font-size="10">{label}'
                         f'{"" if line.ok else " (fails)"}</text>')
        parts.append("</svg>")
        return "".join(parts)


def _table(head: list[str], rows: list[list[str]]) -> str:
    th = "".join(f"<th>{escape(h)}</th>" for h in head)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table>"


def render_methods_html(prov: Provenance) -> str:
    lock = prov.lock
    it, pf = lock.interpreter, lock.platform
    used = [lock.packages[n] for n in sorted(lock.packages) if lock.packages[n].used]
    parts = [f"<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>Computational methods and "
             f"provenance</title><style>{STYLE}</style></head><body>",
             "<h1>Computational methods and provenance</h1>",
             f"<p>Recorded {escape(lock.recorded)} with holotype {escape(lock.holotype or __version__)}.</p>",
             "<h2>Environment</h2>",
             f"<p>{escape(it.implementation)} {escape(it.version)} ({escape(it.compiler)}) on {escape(pf.system)} "
             f"{escape(pf.release)}, {escape(pf.machine)}; C library {escape(pf.libc_text)}. "
             f"Packages used by the analysis: {len(used)}; other installed packages recorded in holotype.lock: "
             f"{len(lock.packages) - len(used)}.</p>",
             _table(["package", "version", "origin"],
                    [[escape(p.name), escape(p.version), escape(p.origin.describe())] for p in used]),
             "<h2>Data</h2>",
             _table(["file", "bytes", "SHA-256"],
                    [[f"<code>{escape(path)}</code>", f"{rec.size:,}",
                      f"<code>{escape(rec.sha256 or 'link to ' + str(rec.target))}</code>"]
                     for path, rec in sorted(lock.data.items())]
                    + [[f"<code>{escape(path)}/</code> ({folder.files:,} files)", f"{folder.bytes:,}",
                        f"listing <code>{folder.listing}</code>"]
                       for path, folder in sorted(lock.data_folders.items())]),
             "<h2>Seeds</h2>",
             f"<p>Project seed {lock.project_seed}; each analysis seed is the first four bytes (big-endian) of "
             "SHA-256 of &quot;&lt;project seed&gt;/&lt;analysis name&gt;&quot;.</p>",
             _table(["analysis", "seed"], [[escape(n), str(r.seed)] for n, r in sorted(lock.analyses.items())]),
             "<h2>Analyses and results</h2>"]
    parts.append("<h2>Run settings</h2><ul>" + "".join(f"<li>{escape(x)}</li>" for x in run_settings(prov))
                 + "</ul>")
    parts.append("<h2>Numerical environment</h2><ul>" + "".join(f"<li>{escape(x)}</li>" for x in numeric_lines(prov))
                 + "</ul>")
    if prov.last_replay_when:
        parts.append(f"<p>Latest replay: {escape(prov.last_replay_text)}.</p>")
    else:
        parts.append("<p>No replay has been recorded on this machine yet.</p>")
    for name in sorted(lock.analyses):
        lines = [line for line in prov.outputs if line.analysis == name]
        parts.append(f"<h3>{escape(name)}</h3><p><code>{escape(lock.analyses[name].command)}</code></p>")
        parts.append(_table(["output", "SHA-256", "tolerance", "latest replay"],
                            [[f"<code>{escape(line.path)}</code>", f"<code>{line.sha256[:16]}…</code>",
                              escape(line.tolerance), escape(line.result)] for line in lines]))
        if lines:
            parts.append(ErrorChart(name, lines).svg())
        for line in lines:
            if line.picture:
                data = base64.b64encode(line.picture).decode("ascii")
                parts.append(f"<figure><img alt=\"where {escape(line.path)} differs\" style=\"max-width:100%\" "
                             f"src=\"data:image/png;base64,{data}\"><figcaption>Where <code>{escape(line.path)}"
                             "</code> differs in the latest replay: changed pixels in red over a faded copy"
                             "</figcaption></figure>")
            if line.candidates:
                parts.append(f"<p>What may have moved <code>{escape(line.path)}</code> ({escape(CAVEAT)}):</p><ol>"
                             + "".join(f"<li>{escape(c)}</li>" for c in line.candidates) + "</ol>")
    parts.append(f"<h2>Caution</h2><p class=\"caution\">{escape(CAUTION)}</p></body></html>\n")
    return "\n".join(parts)
