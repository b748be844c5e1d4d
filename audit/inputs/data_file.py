"""Reading the measurements: a CSV file with a header row, checked row by row.

The file must be UTF-8 (a byte-order mark and Windows or old Mac line ends are fine); another
encoding is refused with the line of the first undecodable byte rather than guessed, because a
wrong guess turns a typo into a silently wrong number. Cells are numbers as a CSV reader writes
them: ASCII digits, sign, point, exponent, ``nan``/``inf``; Python's extras (``1_0``, full-width
or other scripts' digits) are text.
"""
from __future__ import annotations

import csv
import gc
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from .settings import nearest

#: How many offending line numbers an error message lists before "and N more".
LISTED_LINES = 8


@dataclass
class Measurements:
    """Columns read from the data file.

    Attributes:
        x: (m,) for one predictor or (k, m) for k predictors.
        y: (m,) observations.
        sigma: (m,) standard deviations, or None.
        lines: (m,) line numbers in the file of the rows kept (the header is line 1).
        warnings: messages about dropped rows.
    """

    x: np.ndarray
    y: np.ndarray
    sigma: np.ndarray | None
    lines: np.ndarray
    warnings: list[str] = field(default_factory=list)


def read_measurements(path: Path, x_columns: list[str], y_column: str, sigma_column: str | None,
                      drop_nonfinite: bool = False, delimiter: str | None = None) -> Measurements:
    """Read and check the columns of a CSV data file.

    Raises:
        InputError: missing file or column, non-numeric or non-finite values (unless
            ``drop_nonfinite``), sigma ≤ 0, or no rows left; the message names the file, the
            column and the line numbers.
    """
    if not path.is_file():
        raise InputError(f"{path}: data file not found")
    text = _text(path)
    if not text.strip():
        raise InputError(f"{path}: data file is empty")
    if delimiter is None:
        first_line = text.splitlines()[0]
        delimiter = next((mark for mark in (",", ";", "\t") if mark in first_line), ",")
    if len(delimiter) != 1:
        raise InputError(f"{path}: the delimiter must be one character, got {delimiter!r}")
    reader = csv.reader(text.splitlines(), delimiter=delimiter)
    try:
        header = [name.strip() for name in next(reader)]
        with _no_garbage_collection():
            rows = [(number, row) for number, row in enumerate(reader, start=2) if "".join(row).strip()]
    except csv.Error as error:
        raise InputError(f"{path} line {reader.line_num}: not readable as CSV: {error}") from None
    wanted = [*x_columns, y_column] + ([sigma_column] if sigma_column else [])
    for name in wanted:
        if name not in header:
            raise InputError(f"{path}: no column '{name}'{nearest(name, header)}; columns: {', '.join(header)}")
        if header.count(name) > 1:
            raise InputError(f"{path}: column '{name}' appears twice in the header; rename one copy")
    lines = np.array([number for number, _ in rows], dtype=np.int64)
    values = {name: _column(rows, header.index(name)) for name in wanted}
    bad = {name: lines[~np.isfinite(column)].tolist() for name, column in values.items()}
    warnings: list[str] = []
    unusable = np.zeros(len(rows), dtype=bool)
    for name, numbers in bad.items():
        if numbers and not drop_nonfinite:
            raise InputError(f"{path}: column '{name}' has missing, non-numeric or non-finite values at "
                             f"{_lines(numbers)}; fix them or set drop_nonfinite = true in [data]")
        unusable |= np.isin(lines, numbers)
    if unusable.any():
        warnings.append(f"{path}: dropped {int(unusable.sum())} rows with missing or non-finite values at "
                        f"{_lines(lines[unusable].tolist())}")
    keep = ~unusable
    if sigma_column:
        non_positive = keep & (values[sigma_column] <= 0)
        if non_positive.any():
            raise InputError(f"{path}: column '{sigma_column}' (sigma) must be positive; it is not at "
                             f"{_lines(lines[non_positive].tolist())}")
    if not keep.any():
        raise InputError(f"{path}: no usable rows")
    x = np.array([values[name][keep] for name in x_columns])
    return Measurements(
        x=x[0] if len(x_columns) == 1 else x,
        y=values[y_column][keep],
        sigma=values[sigma_column][keep] if sigma_column else None,
        lines=lines[keep],
        warnings=warnings,
    )


def _text(path: Path) -> str:
    """The file as text (UTF-8, an optional byte-order mark dropped), or an InputError naming the line."""
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        line = raw[:error.start].count(b"\n") + 1
        raise InputError(f"{path} line {line}: not UTF-8 text (byte 0x{raw[error.start]:02x}); save the file "
                         "as UTF-8") from None
    if "\0" in text:
        line = text[:text.index("\0")].count("\n") + 1
        raise InputError(f"{path} line {line}: a NUL byte; this looks like a binary file, not CSV text")
    return text


@contextmanager
def _no_garbage_collection() -> Iterator[None]:
    """Pause the cycle collector: a million row lists, none of them in a cycle, would otherwise
    set it off thousands of times (two thirds of the reading time at 10⁶ rows)."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def _column(rows: list[tuple[int, list[str]]], position: int) -> np.ndarray:
    """(len(rows),) the values of one column, NaN where a cell is missing or not a number."""
    cells = [row[position].strip() if position < len(row) else "" for _, row in rows]
    joined = "".join(cells)
    if joined.isascii() and "_" not in joined:
        # numpy reads ASCII cells as float() does; one conversion for the whole column is about
        # ten times faster than a call per cell, which only a column with a bad cell needs.
        try:
            return np.array(cells, dtype=float)
        except ValueError:
            pass
    return np.array([_number(cell) for cell in cells], dtype=float)


def _number(cell: str) -> float:
    """The cell's value, NaN when it is not a number as CSV readers write numbers."""
    if not cell.isascii() or "_" in cell:
        return float("nan")
    try:
        return float(cell)
    except ValueError:
        return float("nan")


def _lines(numbers: list[int]) -> str:
    shown = ", ".join(str(n) for n in numbers[:LISTED_LINES])
    more = f" and {len(numbers) - LISTED_LINES} more" if len(numbers) > LISTED_LINES else ""
    return f"line{'s' if len(numbers) > 1 else ''} {shown}{more}"
