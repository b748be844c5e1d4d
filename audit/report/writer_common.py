"""What the appendix writers share: numbering, verdict words, plain-text clean-up, figure paths.

Each writer escapes for its own format; what is common to all of them lives here, so the
formats number tables and figures alike, accept the same verdict words and point at the same
figure files.
"""
from __future__ import annotations

import re
import shutil
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

from .document import STATUSES, Block, Document, Figure, Table

#: C0 and C1 control characters other than tab and newline: no format can show them, and
#: several (NUL, form feed, escape) break a parser or a terminal that reads the file.
CONTROL_CHARACTERS = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f]")
#: What a control character becomes: visible, so a reader sees that something was there.
CONTROL_STANDIN = "?"
#: Folder beside the written file where linked figures live (issue 14: OUT/figures/).
FIGURES_FOLDER = "figures"


def without_controls(text: str) -> str:
    """``text`` with every control character but tab and newline replaced by CONTROL_STANDIN."""
    return CONTROL_CHARACTERS.sub(CONTROL_STANDIN, text)


def one_line(text: str) -> str:
    """``text`` cleaned of control characters with every run of white space made one space.

    Headings, captions and table cells are one line in every format (a newline ends a
    Markdown table row and a paragraph break is an error inside a LaTeX caption).
    """
    return " ".join(without_controls(text).split())


@dataclass(frozen=True)
class NumberedBlock:
    """A block with its place: ``number`` counts tables and figures apart, from 1; 0 otherwise."""

    block: Block
    number: int


def numbered_blocks(blocks: tuple[Block, ...], counters: dict[type, int]) -> Iterator[NumberedBlock]:
    """Yield ``blocks`` with table and figure numbers that continue across sections.

    ``counters`` (type -> last number used) is updated in place, so one dict passed through all
    sections numbers the whole document.
    """
    for block in blocks:
        if isinstance(block, (Table, Figure)):
            counters[type(block)] = counters.get(type(block), 0) + 1
            yield NumberedBlock(block, counters[type(block)])
        else:
            yield NumberedBlock(block, 0)


def status_word(table: Table, cell: str) -> str:
    """The verdict word a status cell holds; ValueError when it is not one of STATUSES."""
    word = cell.strip()
    if word not in STATUSES:
        raise ValueError(f"table {table.caption!r}: status cell {cell!r} is not one of {', '.join(STATUSES)}")
    return word


def section_ids(document: Document) -> list[str]:
    """A link target per section: its anchor reduced to letters, digits, ``-`` and ``_``.

    HTML ids, Markdown anchors and LaTeX labels all accept that alphabet; a repeated or empty
    anchor gets the section's number appended so that every target is unique.
    """
    seen: set[str] = set()
    ids = []
    for number, section in enumerate(document.sections, start=1):
        base = re.sub(r"[^A-Za-z0-9_-]+", "-", section.anchor).strip("-") or "section"
        candidate = base if base not in seen else f"{base}-{number}"
        seen.add(candidate)
        ids.append(candidate)
    return ids


def linked_figure(file: Path, output_folder: Path) -> str:
    """The path of figure ``file`` relative to ``output_folder``, with ``/`` separators.

    A figure outside ``output_folder`` is copied into its ``figures/`` subfolder first, so the
    written appendix never points out of its own folder and can be moved as a whole.
    FileNotFoundError when the figure is missing: a link to nothing is never written.
    """
    file = Path(file)
    if not file.is_file():
        raise FileNotFoundError(f"figure file {file} does not exist")
    folder = output_folder.resolve()
    source = file.resolve()
    if not source.is_relative_to(folder):
        target = folder / FIGURES_FOLDER / source.name
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(source, target)
        source = target
    return source.relative_to(folder).as_posix()
