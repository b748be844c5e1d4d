r"""The appendix as a LaTeX fragment to ``\input`` into the user's own document.

The fragment has no preamble. The host document needs::

    \usepackage{graphicx}   % \includegraphics for the figures
    \usepackage{booktabs}   % \toprule, \midrule, \bottomrule
    \usepackage{array}      % >{\raggedright\arraybackslash}p{...} table columns

Headings are ``\section`` (the host numbers them), tables are booktabs ``tabular`` floats whose
``p{}`` columns share ``\linewidth`` in proportion to their content and wrap ragged-right, so
no table is wider than the text; figures are ``figure`` floats with
``\includegraphics[width=\linewidth]{figures/NAME.pdf}`` (the PNG when no PDF was drawn), paths
relative to the fragment's folder.

Every string from the document is escaped: the ten TeX specials (``\ & % $ # _ { } ~ ^``),
``< > |`` (which the default OT1 font encoding would print as other glyphs), ``[ ]`` (read as
an optional argument after ``\\``), quotes and the backtick (straight, as typed; ``"`` in the
typewriter font, the only straight double quote OT1 has) and the ``--`` ligature; control
characters become ``?``; words longer than ``BREAK_LONGER_THAN`` characters get break points
(``\hspace{0pt}``, robust in moving arguments such as captions) so they cannot run off the page.

Unicode: the symbols the audit writes (± × − → ≤ ≥ ≈ · ° µ, Greek letters, superscript digits,
dashes and curly quotes) become LaTeX commands, so the fragment runs under any engine and
encoding. Any other non-ASCII character is kept as UTF-8: pdfLaTeX reads UTF-8 input by default
since 2018 (older installations need ``\usepackage[utf8]{inputenc}``), and accented Latin letters
work as they are; a character LaTeX has no glyph for (CJK, emoji) needs a host set up for it
(XeLaTeX or LuaLaTeX with a font that has it).
"""
from __future__ import annotations

import re
import unicodedata
from pathlib import Path

from .column_widths import Measure, column_shares
from .document import Block, Document, Figure, Paragraph, Preformatted, Section, Table
from .writer_common import linked_figure, one_line, section_ids, status_word, without_controls

ASCII_ESCAPES = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
    "<": r"\textless{}", ">": r"\textgreater{}", "|": r"\textbar{}", "[": "{[}", "]": "{]}",
    "`": r"\textasciigrave{}", "'": r"\textquotesingle{}",
    # OT1 has no straight double quote and babel may make " active: the typewriter glyph by number
    '"': r"{\ttfamily\char34}",
}
SYMBOL_COMMANDS = {
    "±": r"\ensuremath{\pm}", "×": r"\ensuremath{\times}", "−": r"\ensuremath{-}", "·": r"\ensuremath{\cdot}",
    "→": r"\ensuremath{\rightarrow}", "←": r"\ensuremath{\leftarrow}", "≤": r"\ensuremath{\leq}",
    "≥": r"\ensuremath{\geq}", "≈": r"\ensuremath{\approx}", "≠": r"\ensuremath{\neq}",
    "∞": r"\ensuremath{\infty}", "√": r"\ensuremath{\surd}", "°": r"\textdegree{}", "µ": r"\ensuremath{\mu}",
    "–": r"\textendash{}", "—": r"\textemdash{}", "…": r"\dots{}", "•": r"\textbullet{}",
    "‘": "`", "’": "'", "“": "``", "”": "''",
    "⁻": r"\textsuperscript{\textminus}", "⁺": r"\textsuperscript{+}",
    **{digit: rf"\textsuperscript{{{value}}}" for value, digit in enumerate("⁰¹²³⁴⁵⁶⁷⁸⁹")},
}
#: Capital Greek letters that look like Latin ones are printed as those; the others have commands.
GREEK_CAPITALS_AS_LATIN = {"ALPHA": "A", "BETA": "B", "EPSILON": "E", "ZETA": "Z", "ETA": "H", "IOTA": "I",
                           "KAPPA": "K", "MU": "M", "NU": "N", "OMICRON": "O", "RHO": "P", "TAU": "T", "CHI": "X"}
#: A word longer than this gets a break point every BREAK_EVERY characters.
BREAK_LONGER_THAN = 16
BREAK_EVERY = 8
#: Tables are set in \small with 4 pt column padding: a 345 pt line (10 pt article) holds about 64
#: characters of \small text (5.4 pt each, wide letters included), bold headings are about 1.3
#: times wider and the padding (2\tabcolsep = 8 pt) is 1.5 characters.
LATEX_MEASURE = Measure(line_characters=64, padding_characters=1.5, bold_width=1.3,
                        break_longer_than=BREAK_LONGER_THAN, break_every=BREAK_EVERY)
#: Characters allowed in a figure path given to \includegraphics.
SAFE_FIGURE_PATH = re.compile(r"[A-Za-z0-9._/-]+")
TONE_LABELS = {"note": "Note", "caution": "Caution"}


def greek_command(character: str) -> str | None:
    """The LaTeX for a plain Greek letter (``α`` -> ``\\ensuremath{\\alpha}``), or None."""
    match = re.fullmatch(r"GREEK (SMALL|CAPITAL) LETTER ([A-Z]+|FINAL SIGMA)", unicodedata.name(character, ""))
    if not match:
        return None
    case, letter = match.groups()
    command = {"LAMDA": "lambda", "FINAL SIGMA": "varsigma"}.get(letter, letter.lower())
    if case == "SMALL":
        return "o" if letter == "OMICRON" else rf"\ensuremath{{\{command}}}"
    return GREEK_CAPITALS_AS_LATIN.get(letter, rf"\ensuremath{{\{command.capitalize()}}}")


def escape_word(word: str) -> str:
    """One word (no white space) escaped for LaTeX text mode."""
    out = []
    for position, character in enumerate(word):
        following = word[position + 1: position + 2]
        if character in ASCII_ESCAPES:
            out.append(ASCII_ESCAPES[character])
        elif character == "-" and following == "-":
            out.append("-{}")  # keep -- from becoming a dash
        elif character in SYMBOL_COMMANDS:
            out.append(SYMBOL_COMMANDS[character])
        elif ord(character) > 127 and (greek := greek_command(character)) is not None:
            out.append(greek)
        else:
            out.append(character)
    return "".join(out)


def breakable(word: str) -> str:
    """``word`` escaped, with a break point every BREAK_EVERY characters when it is too long."""
    if len(word) <= BREAK_LONGER_THAN:
        return escape_word(word)
    pieces = [word[start: start + BREAK_EVERY] for start in range(0, len(word), BREAK_EVERY)]
    return r"\hspace{0pt}".join(escape_word(piece) for piece in pieces)


def has_long_word(value: str) -> bool:
    """Whether ``value`` holds a word that ``breakable`` splits."""
    return any(len(word) > BREAK_LONGER_THAN for word in one_line(value).split(" "))


def text(value: str) -> str:
    """``value`` as one line of LaTeX text that prints as written."""
    return " ".join(breakable(word) for word in one_line(value).split(" "))


def write_latex(document: Document, path: Path) -> Path:
    r"""Write ``document`` to ``path`` as a LaTeX fragment to ``\input``; returns ``path``.

    Figures are referenced relative to ``path.parent`` (a figure outside it is first copied
    into its ``figures/`` subfolder). Raises FileNotFoundError for a missing figure and
    ValueError for a figure path LaTeX cannot read or a status cell with no verdict word.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(render_latex(document, path.parent), encoding="utf-8")
    return path


def render_latex(document: Document, folder: Path) -> str:
    """The fragment for ``document`` as text, figure paths relative to ``folder``."""
    lines = [r"\begin{center}", rf"{{\Large\bfseries {text(document.title)}\par}}", r"\smallskip",
             rf"{{{text(document.subtitle)}\par}}", r"\end{center}"]
    for section, target in zip(document.sections, section_ids(document)):
        lines += ["", *render_section(section, target, folder)]
    return "\n".join(lines) + "\n"


def render_section(section: Section, target: str, folder: Path) -> list[str]:
    """A section; LaTeX numbers it and its tables and figures itself."""
    lines = [rf"\section{{{text(section.title)}}}\label{{sec:{target}}}"]
    for block in section.blocks:
        lines += ["", *render_block(block, folder)]
    return lines


def render_block(block: Block, folder: Path) -> list[str]:
    if isinstance(block, Paragraph):
        body = text(block.text)
        if has_long_word(block.text):  # justified lines need stretch that a broken long word lacks
            body = r"\raggedright " + body
        if block.tone == "plain":
            return [rf"{{{body}\par}}"]
        if block.tone == "note":
            return [rf"{{\noindent\textbf{{{TONE_LABELS['note']}:}} {body}\par}}"]
        return [r"\par\noindent\fbox{\parbox{\dimexpr\linewidth-2\fboxsep-2\fboxrule\relax}{",
                rf"\textbf{{{TONE_LABELS['caution']}:}} {body}}}}}"]
    if isinstance(block, Table):
        return render_table(block)
    if isinstance(block, Figure):
        return render_figure(block, folder)
    if isinstance(block, Preformatted):
        return render_preformatted(block.text)
    raise TypeError(f"not a document block: {type(block).__name__}")


def column_spec(table: Table) -> str:
    """Ragged-right ``p{}`` columns whose widths, padding included, add up to ``\\linewidth``."""
    return "".join(rf">{{\raggedright\arraybackslash}}p{{\dimexpr {share:.3f}\linewidth-2\tabcolsep\relax}}"
                   for share in column_shares(table, LATEX_MEASURE))


def render_table(table: Table) -> list[str]:
    def cell(column: int, value: str) -> str:
        if column != table.status_column:
            return text(value)
        word = status_word(table, value)
        return rf"\textbf{{{text(word)}}}" if word in ("warn", "fail") else text(word)

    lines = [r"\begin{table}[htbp]", r"\centering", rf"\caption{{{text(table.caption)}}}",
             r"\small\setlength{\tabcolsep}{4pt}", rf"\begin{{tabular}}{{{column_spec(table)}}}", r"\toprule",
             " & ".join(rf"\textbf{{{text(heading)}}}" for heading in table.header) + r" \\", r"\midrule"]
    lines += [" & ".join(cell(column, value) for column, value in enumerate(row)) + r" \\" for row in table.rows]
    lines += [r"\bottomrule", r"\end{tabular}"]
    if table.notes:
        lines += [r"\par\smallskip{\footnotesize\raggedright", *(text(note) + r"\par" for note in table.notes), "}"]
    return lines + [r"\end{table}"]


def render_figure(figure: Figure, folder: Path) -> list[str]:
    link = linked_figure(figure.pdf if figure.pdf is not None else figure.png, folder)
    if not SAFE_FIGURE_PATH.fullmatch(link):
        raise ValueError(f"figure path {link!r}: LaTeX needs letters, digits and . _ / - only")
    return [r"\begin{figure}[htbp]", r"\centering", rf"\includegraphics[width=\linewidth]{{{link}}}",
            rf"\caption{{{text(figure.caption)}}}", r"\end{figure}"]


def render_preformatted(value: str) -> list[str]:
    r"""Fixed-width lines as written: spaces kept (``\ ``), long runs broken, no verbatim.

    A verbatim environment would end at the first ``\end{verbatim}`` inside the text, so the
    text is escaped like any other; ``\mbox{}`` opens each line so its leading spaces survive.
    """
    lines = []
    for line in without_controls(value).splitlines() or [""]:
        words = (breakable(word) for word in line.split(" "))
        lines.append(r"\mbox{}" + r"\ ".join(words))
    return [r"\begin{flushleft}\ttfamily\small", (" \\\\\n").join(lines), r"\end{flushleft}"]
