"""How wide each table column is: a share of the line that follows its content.

A column's share follows its longest cell, but never drops below what its longest unbreakable
word needs (a verdict cell, mark and word, counts as one word), so short headings and numbers
are never split letter by letter while long text wraps. Both the HTML and the LaTeX writer use
it, each with the measure of its own page.
"""
from __future__ import annotations

from dataclasses import dataclass

from .document import Table
from .writer_common import one_line

#: A column's weight is its longest cell in characters, within these bounds.
COLUMN_WEIGHT_BOUNDS = (6, 40)
#: Characters a verdict cell adds to its word (the mark and a space, in HTML).
STATUS_MARK_CHARACTERS = 2


@dataclass(frozen=True)
class Measure:
    """A format's page in characters of table text.

    Attributes:
        line_characters: characters of table text on one full line.
        padding_characters: a cell's left plus right padding, in characters.
        bold_width: how much wider a bold heading is than body text.
        break_longer_than: a word longer than this may be broken ...
        break_every: ... into pieces this long.
    """

    line_characters: float
    padding_characters: float
    bold_width: float
    break_longer_than: int
    break_every: int

    def unbreakable_length(self, value: str) -> int:
        """The longest run of characters in ``value`` that no line break can split."""
        return max(len(word) if len(word) <= self.break_longer_than else self.break_every
                   for word in one_line(value).split(" "))


def column_shares(table: Table, measure: Measure) -> list[float]:
    """Each column's share of the line, adding up to 1.

    Shares follow the longest cell (clamped to COLUMN_WEIGHT_BOUNDS); a column that would get
    less than its longest unbreakable word needs gets that minimum and the others share the
    rest; when the minima alone exceed the line, they are scaled down together.
    """
    low, high = COLUMN_WEIGHT_BOUNDS
    columns = list(zip(table.header, *table.rows))
    wants = [min(max(max(len(one_line(cell)) for cell in column), low), high) for column in columns]
    needs = []
    for index, (heading, *cells) in enumerate(columns):
        if index == table.status_column:
            body = max((len(cell.strip()) + STATUS_MARK_CHARACTERS for cell in cells), default=0)
        else:
            body = max((measure.unbreakable_length(cell) for cell in cells), default=0)
        widest = max(body, measure.bold_width * measure.unbreakable_length(heading))
        needs.append((widest + measure.padding_characters) / measure.line_characters)
    if sum(needs) >= 1.0:
        return [need / sum(needs) for need in needs]
    held: set[int] = set()
    while True:  # held columns get their minimum; the others share the rest by their weights
        free = [index for index in range(len(columns)) if index not in held]
        scale = (1.0 - sum(needs[index] for index in held)) / sum(wants[index] for index in free)
        short = {index for index in free if scale * wants[index] < needs[index]}
        if not short:
            return [needs[index] if index in held else scale * wants[index] for index in range(len(columns))]
        held |= short
