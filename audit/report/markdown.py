"""The appendix as Markdown (CommonMark with pipe tables), figures linked under ``figures/``.

Text from the document is escaped so that a CommonMark reader shows it as written: every ASCII
character with a meaning in Markdown, or in the HTML that Markdown lets through, is preceded by
a backslash (the escape CommonMark defines for all ASCII punctuation), ``|`` included so a cell
never splits a table row. Preformatted text goes in a fenced block whose fence is longer than
any run of backticks inside it. Headings are numbered; each section is preceded by an empty
``<a id>`` anchor whose name uses only letters, digits, ``-`` and ``_``, so the contents list
links work in any reader that keeps inline HTML.
"""
from __future__ import annotations

import re
from pathlib import Path
from urllib.parse import quote

from .document import Document, Figure, Paragraph, Preformatted, Section, Table
from .writer_common import (
    NumberedBlock,
    linked_figure,
    numbered_blocks,
    one_line,
    section_ids,
    status_word,
    without_controls,
)

#: ASCII characters that start or end Markdown or HTML constructs anywhere in a line (``{}``,
#: ``$``, ``~`` and ``^`` for the attribute, math, strike-through and superscript extensions).
SPECIAL = re.compile(r"([\\`*_{}\[\]<>#|~^&$])")
#: What makes a line a list item or a rule when it comes first: ``-``, ``+``, ``=`` ...
LEADING_MARK = re.compile(r"^([-+=])")
#: ... and ``1.`` or ``1)`` (an ordered list item).
LEADING_NUMBER = re.compile(r"^(\d{1,9})([.)])")
TONE_LABELS = {"note": "Note", "caution": "Caution"}


def write_markdown(document: Document, path: Path) -> Path:
    """Write ``document`` to ``path`` as Markdown; returns ``path``.

    Figures are linked by their path relative to ``path.parent``; a figure outside that folder
    is first copied into its ``figures/`` subfolder. Raises FileNotFoundError for a missing
    figure and ValueError for a status cell that holds no verdict word.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(render_markdown(document, path.parent), encoding="utf-8")
    return path


def render_markdown(document: Document, folder: Path) -> str:
    """The Markdown text of ``document`` with figure links relative to ``folder``."""
    ids = section_ids(document)
    subtitle = [f"*{text(document.subtitle)}*", ""] if one_line(document.subtitle) else []  # ** alone is text
    lines = [f"# {text(document.title)}", "", *subtitle, "**Contents**", ""]
    lines += [f"{number}. [{text(section.title)}](#{target})"
              for number, (section, target) in enumerate(zip(document.sections, ids), start=1)]
    counters: dict[type, int] = {}
    for number, (section, target) in enumerate(zip(document.sections, ids), start=1):
        lines += ["", *render_section(number, section, target, counters, folder)]
    return "\n".join(lines) + "\n"


def text(value: str) -> str:
    """``value`` as one line of Markdown text that a CommonMark reader shows as written."""
    return SPECIAL.sub(r"\\\1", one_line(value))


def paragraph(value: str) -> str:
    """``value`` as a paragraph: escaped as ``text`` and never read as a list item or a rule."""
    return LEADING_NUMBER.sub(r"\1\\\2", LEADING_MARK.sub(r"\\\1", text(value)))


def render_section(number: int, section: Section, target: str, counters: dict[type, int], folder: Path) -> list[str]:
    lines = [f'<a id="{target}"></a>', "", f"## {number}. {text(section.title)}"]
    for item in numbered_blocks(section.blocks, counters):
        lines += ["", *render_block(item, folder)]
    return lines


def render_block(item: NumberedBlock, folder: Path) -> list[str]:
    block = item.block
    if isinstance(block, Paragraph):
        if block.tone == "plain":
            return [paragraph(block.text)]
        return [f"> **{TONE_LABELS[block.tone]}:** {text(block.text)}"]
    if isinstance(block, Table):
        return render_table(block, item.number)
    if isinstance(block, Figure):
        link = quote(linked_figure(block.png, folder), safe="/")
        return [f"![{text(block.caption)}]({link})", "", f"*Figure {item.number}. {text(block.caption)}*"]
    if isinstance(block, Preformatted):
        body = without_controls(block.text)
        longest = max((len(run) for run in re.findall(r"`+", body)), default=0)
        fence = "`" * max(3, longest + 1)
        return [f"{fence}text", *body.splitlines(), fence]
    raise TypeError(f"not a document block: {type(block).__name__}")


def render_table(table: Table, number: int) -> list[str]:
    def row(cells) -> str:
        return "| " + " | ".join(cells) + " |"

    body = [row(text(status_word(table, cell) if column == table.status_column else cell)
                for column, cell in enumerate(cells)) for cells in table.rows]
    lines = [f"**Table {number}. {text(table.caption)}**", "", row(text(cell) for cell in table.header),
             row("---" for _ in table.header), *body]
    if table.notes:
        lines += ["", *(f"- {text(note)}" for note in table.notes)]
    return lines
