"""The appendix as plain data: sections of paragraphs, tables, figures and preformatted text.

The audit's numbers are turned into a ``Document`` once (``report.appendix``); each writer
(HTML, Markdown, LaTeX) only renders it, so the formats can never disagree. Every string here
is plain text as the user or the audit wrote it: escaping for HTML, LaTeX or Markdown is the
writers' job, never the caller's.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

#: The tones a paragraph can have: plain text, a note worth a glance, a caution to heed.
TONES = ("plain", "note", "caution")
#: The words a verdict cell may hold; writers colour or mark them.
STATUSES = ("pass", "warn", "fail", "not run")


@dataclass(frozen=True)
class Paragraph:
    """A paragraph of plain text; ``tone`` is one of TONES."""

    text: str
    tone: str = "plain"

    def __post_init__(self):
        if self.tone not in TONES:
            raise ValueError(f"tone {self.tone!r}: expected one of {', '.join(TONES)}")


@dataclass(frozen=True)
class Table:
    """A table of text cells.

    Attributes:
        caption: one line saying what the table shows.
        header: the column headings.
        rows: each a tuple of cells, as many as ``header``.
        status_column: index of a column holding STATUSES words (the verdict), or None.
        notes: lines printed under the table (units, what a dash means).
    """

    caption: str
    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    status_column: int | None = None
    notes: tuple[str, ...] = ()

    def __post_init__(self):
        for row in self.rows:
            if len(row) != len(self.header):
                raise ValueError(f"table {self.caption!r}: a row has {len(row)} cells for {len(self.header)} columns")


@dataclass(frozen=True)
class Figure:
    """A figure already written to disk: ``png`` for HTML and Markdown, ``pdf`` for LaTeX."""

    png: Path
    caption: str
    pdf: Path | None = None


@dataclass(frozen=True)
class Preformatted:
    """Text shown as written, in a fixed-width font (a command line, a model's source)."""

    text: str


Block = Paragraph | Table | Figure | Preformatted


@dataclass(frozen=True)
class Section:
    """A numbered section: a title, an anchor for links, and its blocks in order."""

    title: str
    anchor: str
    blocks: tuple[Block, ...] = field(default_factory=tuple)


@dataclass(frozen=True)
class Document:
    """The whole appendix: a title, a one-line subtitle and the sections in reading order."""

    title: str
    subtitle: str
    sections: tuple[Section, ...]
