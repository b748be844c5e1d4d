"""The appendix as one self-contained HTML page.

Everything the page needs is inside the file: the stylesheet inline, each figure a base64
``data:`` URI, no script, font or link to anything outside; a Content-Security-Policy meta tag
forbids fetching anything else, so even a page edited by hand cannot load from the network.
Every string from the document passes through ``html.escape``; the only markup in the file is
written by this module. Verdict cells show the word and a mark of its own shape (not colour
alone: they must read in greyscale print and to readers who do not tell red from green). A
print stylesheet keeps rows, figures and captions whole and repeats a table's head on each page.
"""
from __future__ import annotations

import base64
import html
from pathlib import Path

from .column_widths import Measure, column_shares
from .document import Document, Figure, Paragraph, Preformatted, Section, Table
from .writer_common import NumberedBlock, numbered_blocks, one_line, section_ids, status_word, without_controls

#: Verdict word -> the mark shown before it; each a different shape, so no colour is needed.
STATUS_MARKS = {"pass": "✓", "warn": "▲", "fail": "✗", "not run": "○"}
#: Labels that open a paragraph of a given tone, so the tone does not rest on colour either.
TONE_LABELS = {"note": "Note", "caution": "Caution"}
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
#: The narrowest page the stylesheet sets, printed A4 (182 mm = 688 px of 12.9 px table text,
#: up to 8.6 px a character in DejaVu Sans): 80 characters a line, bold headings 1.35 times
#: wider, cell padding (2 x 0.6 rem) 2.5 characters. Words longer than 16 characters may wrap
#: anywhere. Measured on the printed example: "Name" no longer breaks in a six-column table.
HTML_MEASURE = Measure(line_characters=80, padding_characters=2.5, bold_width=1.35, break_longer_than=16,
                       break_every=8)

STYLESHEET = """
:root { --ink: #1d1d1f; --muted: #55575c; --rule: #c9ccd1; --band: #f4f5f7; }
body { font: 15px/1.5 "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif; color: var(--ink);
       max-width: 60rem; margin: 2rem auto; padding: 0 1.5rem; }
h1 { font-size: 1.7em; margin-bottom: 0.2rem; }
h2 { font-size: 1.3em; margin-top: 2.2rem; border-bottom: 1px solid var(--rule); padding-bottom: 0.2rem; }
p, td, th, caption, figcaption, li, h1, h2, pre, .table-notes { overflow-wrap: anywhere; }
.subtitle { color: var(--muted); margin-top: 0; }
nav { background: var(--band); padding: 0.6rem 1.2rem; border-radius: 4px; }
nav h2 { font-size: 1em; margin: 0.3rem 0; border: none; }
nav ol { margin: 0.2rem 0; padding-left: 1.4rem; }
.note { border-left: 4px solid #4a6fa5; padding: 0.3rem 0.8rem; background: #eef2f8; }
.caution { border: 2px solid #9c3d10; padding: 0.4rem 0.8rem; background: #fbefe7; }
.table-block { margin: 1.2rem 0; }
table { border-collapse: collapse; width: 100%; font-size: 0.92em; table-layout: fixed; }
caption { caption-side: top; text-align: left; font-weight: 600; padding-bottom: 0.4rem; }
th, td { text-align: left; vertical-align: top; padding: 0.3rem 0.6rem; border-bottom: 1px solid var(--rule); }
thead th { border-bottom: 2px solid var(--ink); }
tbody tr:nth-child(even) { background: var(--band); }
.table-notes { color: var(--muted); font-size: 0.85em; margin: 0.3rem 0 0; padding-left: 1.2rem; }
td.status { white-space: nowrap; font-weight: 600; }
.status .mark { display: inline-block; width: 1.2em; text-align: center; }
.status-pass { color: #1e6b30; }
.status-warn { color: #7a5200; background: #fff3c4; }
.status-fail { color: #a11616; background: #fde2de; }
.status-not-run { color: var(--muted); }
figure.plot { margin: 1.2rem 0; text-align: center; }
figure.plot img { max-width: 100%; height: auto; }
figcaption { font-size: 0.9em; color: var(--muted); }
pre { background: var(--band); padding: 0.6rem 0.8rem; white-space: pre-wrap; font-size: 0.85em;
      font-family: "DejaVu Sans Mono", Consolas, monospace; }
@media print {
  @page { size: A4; margin: 16mm 14mm; }
  body { font-size: 10.5pt; max-width: none; margin: 0; padding: 0; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  h2 { break-after: avoid; }
  tr, figure, pre, .note, .caution { break-inside: avoid; }
  caption { break-after: avoid; }
  thead { display: table-header-group; }
  .table-block { break-inside: avoid; }
  .table-notes { break-before: avoid; }
}
"""
#: Only inline styles and data: images may be used; nothing is fetched and no script runs.
CONTENT_POLICY = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"


def write_html(document: Document, path: Path) -> Path:
    """Write ``document`` to ``path`` as one self-contained HTML page; returns ``path``.

    Raises FileNotFoundError for a missing figure, ValueError for a figure that is not a PNG or
    a status cell that holds no verdict word.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(render_html(document), encoding="utf-8")
    return path


def render_html(document: Document) -> str:
    """The page for ``document`` as text."""
    ids = section_ids(document)
    contents = "\n".join(f'<li><a href="#{target}">{text(section.title)}</a></li>'
                         for target, section in zip(ids, document.sections))
    counters: dict[type, int] = {}
    sections = "\n".join(render_section(number, section, target, counters)
                         for number, (section, target) in enumerate(zip(document.sections, ids), start=1))
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        f'<meta http-equiv="Content-Security-Policy" content="{CONTENT_POLICY}">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{text(document.title)}</title>\n<style>{STYLESHEET}</style>\n</head>\n<body>\n"
        f"<header>\n<h1>{text(document.title)}</h1>\n<p class=\"subtitle\">{text(document.subtitle)}</p>\n</header>\n"
        f'<nav aria-label="Contents">\n<h2>Contents</h2>\n<ol>\n{contents}\n</ol>\n</nav>\n'
        f"<main>\n{sections}\n</main>\n</body>\n</html>\n"
    )


def text(value: str) -> str:
    """``value`` as HTML text: one line, control characters replaced, every special escaped."""
    return html.escape(one_line(value), quote=True)


def render_section(number: int, section: Section, target: str, counters: dict[type, int]) -> str:
    blocks = "\n".join(render_block(item) for item in numbered_blocks(section.blocks, counters))
    return f'<section id="{target}">\n<h2>{number}. {text(section.title)}</h2>\n{blocks}\n</section>'


def render_block(item: NumberedBlock) -> str:
    block = item.block
    if isinstance(block, Paragraph):
        if block.tone == "plain":
            return f"<p>{text(block.text)}</p>"
        return f'<p class="{block.tone}"><strong>{TONE_LABELS[block.tone]}:</strong> {text(block.text)}</p>'
    if isinstance(block, Table):
        return render_table(block, item.number)
    if isinstance(block, Figure):
        return render_figure(block, item.number)
    if isinstance(block, Preformatted):
        return f"<pre>{html.escape(without_controls(block.text), quote=True)}</pre>"
    raise TypeError(f"not a document block: {type(block).__name__}")


def render_table(table: Table, number: int) -> str:
    header = "".join(f'<th scope="col">{text(cell)}</th>' for cell in table.header)
    rows = "\n".join("<tr>" + "".join(render_cell(table, column, cell) for column, cell in enumerate(row)) + "</tr>"
                     for row in table.rows)
    notes = ""
    if table.notes:
        notes = '<ul class="table-notes">' + "".join(f"<li>{text(note)}</li>" for note in table.notes) + "</ul>"
    widths = "".join(f'<col style="width: {100 * share:.2f}%">' for share in column_shares(table, HTML_MEASURE))
    return (f'<div class="table-block">\n<table>\n<caption>Table {number}. {text(table.caption)}</caption>\n'
            f"<colgroup>{widths}</colgroup>\n<thead><tr>{header}</tr></thead>\n"
            f"<tbody>\n{rows}\n</tbody>\n</table>\n{notes}</div>")


def render_cell(table: Table, column: int, cell: str) -> str:
    if column != table.status_column:
        return f"<td>{text(cell)}</td>"
    word = status_word(table, cell)
    return (f'<td class="status status-{word.replace(" ", "-")}">'
            f'<span class="mark" aria-hidden="true">{STATUS_MARKS[word]}</span> {text(word)}</td>')


def render_figure(figure: Figure, number: int) -> str:
    picture = Path(figure.png).read_bytes()
    if not picture.startswith(PNG_SIGNATURE):
        raise ValueError(f"figure {figure.png} is not a PNG file")
    encoded = base64.b64encode(picture).decode("ascii")
    return (f'<figure class="plot">\n<img src="data:image/png;base64,{encoded}" alt="{text(figure.caption)}">\n'
            f"<figcaption>Figure {number}. {text(figure.caption)}</figcaption>\n</figure>")
