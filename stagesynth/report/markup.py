"""The document model rendered: GitHub-flavoured Markdown (figures linked) and one
self-contained HTML file (inline CSS, inline SVG figures, no external resources)."""

from __future__ import annotations

import html
import re
from collections.abc import Mapping

from stagesynth.report.docmodel import FIGURE_FILES, Document, Figure, Table


# ---------------------------------------------------------------------------
# Markdown
# ---------------------------------------------------------------------------
def _md_cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def _md_table(t: Table) -> list[str]:
    out = ["| " + " | ".join(_md_cell(h) for h in t.header) + " |"]
    out.append("|" + "|".join("---:" if i in t.numeric else "---"
                              for i in range(len(t.header))) + "|")
    for row in t.rows:
        cells = [_md_cell(c) for c in row]
        if t.status is not None and cells[t.status] == "FAIL":
            cells[t.status] = "**FAIL**"
        out.append("| " + " | ".join(cells) + " |")
    return out


def render_markdown(doc: Document) -> str:
    """GitHub-flavoured Markdown; figures are links to the SVG files beside it."""
    out = [f"# {doc.title}", "", doc.subtitle, "", f"**{doc.status}**", ""]
    for sec in doc.sections:
        out += [f"## {sec.title}", ""]
        for block in sec.blocks:
            if isinstance(block, str):
                out += [block, ""]
            elif isinstance(block, list):
                out += [f"- {item}" for item in block] + [""]
            elif isinstance(block, Table):
                out += [*_md_table(block), ""]
            elif isinstance(block, Figure):
                out += [f"![{block.alt}]({FIGURE_FILES[block.name]})", "",
                        f"*{block.caption}*", ""]
    return "\n".join(out).rstrip() + "\n"


# ---------------------------------------------------------------------------
# HTML
# ---------------------------------------------------------------------------
_CSS = """
:root { --ink:#1f1f1f; --muted:#5c5c5c; --rule:#d4d4d0; --head:#f3f3f0; --accent:#1d4e89;
        --ok:#1e5b2a; --bad:#9e1c1c; --warn:#7a5a00; }
* { box-sizing: border-box; }
html { background: #fafaf8; }
body { margin: 0 auto; max-width: 1120px; padding: 2.2rem 2rem 3rem; background: #fff;
       color: var(--ink); font: 15px/1.55 "DejaVu Sans", "Liberation Sans", "Helvetica Neue",
       Arial, sans-serif; }
h1 { font-size: 1.75rem; line-height: 1.25; margin: 0 0 .3rem; letter-spacing: -.01em; }
h2 { font-size: 1.2rem; margin: 2.3rem 0 .7rem; padding-bottom: .25rem;
     border-bottom: 1px solid var(--rule); color: var(--accent); }
p { margin: .5rem 0 .8rem; max-width: 78ch; }
.subtitle { color: var(--muted); margin: 0 0 1.1rem; }
.status { margin: 1rem 0 1.4rem; padding: .7rem 1rem; border-left: 5px solid var(--muted);
          background: var(--head); font-weight: 600; }
.status.ok { border-color: var(--ok); } .status.bad { border-color: var(--bad); }
.scroll { overflow-x: auto; margin: .4rem 0 1rem; }
table { border-collapse: collapse; width: 100%; font-size: .86rem; }
th, td { padding: .32rem .55rem; border-bottom: 1px solid var(--rule); text-align: left;
         vertical-align: top; }
th { background: var(--head); font-weight: 600; border-bottom: 1.5px solid #9b9b96;
     white-space: nowrap; }
th.num { text-align: right; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tbody tr:nth-child(even) td { background: #fbfbf9; }
td.pass { color: var(--ok); font-weight: 700; white-space: nowrap; }
td.pass::before { content: "✓ "; }
td.fail { color: var(--bad); font-weight: 700; white-space: nowrap; }
td.fail::before { content: "✗ "; }
figure { margin: 1rem 0 1.6rem; }
figure .art { border: 1px solid var(--rule); padding: .4rem; background: #fff; }
figure svg { display: block; width: 100%; height: auto; max-height: 900px; }
figcaption { color: var(--muted); font-size: .85rem; margin-top: .4rem; max-width: 95ch; }
ul { padding-left: 1.3rem; } li { margin: .25rem 0; max-width: 90ch; }
section.safety { margin-top: 2.3rem; padding: .2rem 1.1rem .6rem;
                 border: 1px solid #c9b46a; border-left: 5px solid var(--warn);
                 background: #fffcf0; }
section.safety h2 { color: var(--warn); border-bottom-color: #e3d7a6; margin-top: 1rem; }
footer { margin-top: 2.5rem; color: var(--muted); font-size: .8rem;
         border-top: 1px solid var(--rule); padding-top: .6rem; }
@media print {
  @page { size: A4; margin: 14mm 12mm; }
  html, body { background: #fff; }
  body { max-width: none; padding: 0; font-size: 9.5pt; }
  h2 { break-after: avoid; page-break-after: avoid; margin-top: 1.4rem; }
  figure, table, tr, .status, section.safety { break-inside: avoid; page-break-inside: avoid; }
  figure svg { max-height: 150mm; }
  .scroll { overflow: visible; }
  table { font-size: 8pt; }
  tbody tr:nth-child(even) td { background: none; }
}
"""

_XML_PROLOG = re.compile(r"<\?xml[^>]*\?>\s*|<!DOCTYPE[^>]*>\s*", re.S)
_METADATA = re.compile(r"<metadata>.*?</metadata>\s*", re.S)
_COMMENT = re.compile(r"<!--.*?-->", re.S)
_ID = re.compile(r'\bid="([^"]+)"')


def inline_svg(svg: str, prefix: str, label: str) -> str:
    """An SVG document made safe to inline in HTML next to others.

    Drops the XML prolog, DOCTYPE, metadata and namespace declarations (the HTML
    parser supplies the SVG namespace), prefixes every id and reference to it so two
    figures cannot clash, and lets CSS size the root element.
    """
    text = _COMMENT.sub("", _METADATA.sub("", _XML_PROLOG.sub("", svg))).strip()
    ids = sorted(set(_ID.findall(text)), key=len, reverse=True)
    if ids:
        alternation = "|".join(re.escape(i) for i in ids)
        text = re.sub(rf'\bid="({alternation})"', lambda m: f'id="{prefix}-{m.group(1)}"', text)
        text = re.sub(rf"#({alternation})(?=[\"')\s])", lambda m: f"#{prefix}-{m.group(1)}",
                      text)
    root = re.match(r"\s*<svg\b[^>]*>", text)
    if root is None:
        raise ValueError("not an SVG document")
    tag = root.group(0)
    new_tag = re.sub(r'\s(?:xmlns(?::\w+)?|width|height|version)="[^"]*"', "", tag)
    new_tag = new_tag.replace("<svg", f'<svg role="img" aria-label="{html.escape(label)}"', 1)
    return new_tag + text[root.end():]


def _html_table(t: Table) -> str:
    out = ['<div class="scroll"><table>', "<thead><tr>"]
    out += [f'<th class="num">{html.escape(h)}</th>' if i in t.numeric
            else f"<th>{html.escape(h)}</th>" for i, h in enumerate(t.header)]
    out.append("</tr></thead><tbody>")
    for row in t.rows:
        out.append("<tr>")
        for i, cell in enumerate(row):
            cls = ""
            if t.status is not None and i == t.status:
                cls = ' class="pass"' if cell == "pass" else ' class="fail"'
            elif i in t.numeric:
                cls = ' class="num"'
            out.append(f"<td{cls}>{html.escape(str(cell))}</td>")
        out.append("</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


def render_html(doc: Document, svgs: Mapping[str, str]) -> str:
    """One self-contained HTML file: inline CSS, inline SVG figures, no external resources."""
    e = html.escape
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{e(doc.title)}: stage report</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<header><h1>{e(doc.title)}</h1><p class=\"subtitle\">{e(doc.subtitle)}</p></header>",
    ]
    cls = "" if doc.status_ok is None else (" ok" if doc.status_ok else " bad")
    parts.append(f'<p class="status{cls}">{e(doc.status)}</p>')
    for k, sec in enumerate(doc.sections):
        css = f' class="{sec.css_class}"' if sec.css_class else ""
        parts.append(f'<section{css} id="s{k + 1}"><h2>{e(sec.title)}</h2>')
        for block in sec.blocks:
            if isinstance(block, str):
                parts.append(f"<p>{e(block)}</p>")
            elif isinstance(block, list):
                parts.append("<ul>" + "".join(f"<li>{e(i)}</li>" for i in block) + "</ul>")
            elif isinstance(block, Table):
                parts.append(_html_table(block))
            elif isinstance(block, Figure):
                svg = svgs.get(block.name)
                art = (inline_svg(svg, f"fig-{block.name}", block.alt) if svg
                       else f"<p>({e(block.name)} figure not available)</p>")
                parts.append(f'<figure><div class="art">{art}</div>'
                             f"<figcaption>{e(block.caption)}</figcaption></figure>")
        parts.append("</section>")
    parts.append("<footer>Generated by stagesynth from the design's own analysis. All figures "
                 "are predictions of the reference device model at the stated conditions."
                 "</footer>")
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"
