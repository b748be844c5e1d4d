"""The LaTeX appendix fragment, read the way TeX reads it, and compiled where TeX is installed.

References: TeX's reading rules (The TeXbook, ch. 7: a backslash and letters, or a backslash and
one other character, make one control sequence; ``%`` starts a comment; ``# $ & ^ _ ~`` have
meanings of their own), the OT1 font encoding's table (LaTeX2e font selection guide: ``< > |``
and ``"`` print as other glyphs in OT1 text), and where installed pdflatex itself with pdftotext
(poppler) reading the PDF back.
"""
from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest
from report_examples import HOSTILE, HOSTILE_TITLE, LONG_WORD, SYMBOLS, example_document

from audit.report.document import Document, Section, Table
from audit.report.latex import write_latex

CONTROL_SEQUENCE = re.compile(r"\\([A-Za-z]+|.)", re.DOTALL)


def without_commands(fragment: str) -> str:
    """The fragment with every control sequence removed: what TeX reads as plain characters."""
    return CONTROL_SEQUENCE.sub("", fragment)


def tables_of(document: Document) -> list[Table]:
    return [block for section in document.sections for block in section.blocks if isinstance(block, Table)]


@pytest.fixture
def fragment(tmp_path) -> tuple[Document, Path, str]:
    document = example_document(tmp_path)
    path = write_latex(document, tmp_path / "appendix.tex")
    return document, path, path.read_text(encoding="utf-8")


def test_environments_and_braces_balance_as_tex_reads_them(fragment):
    _, _, text = fragment
    open_environments = []
    for kind, name in re.findall(r"\\(begin|end)\{([^}]*)\}", text):
        if kind == "begin":
            open_environments.append(name)
        else:
            assert open_environments and open_environments.pop() == name, name
    assert open_environments == []
    depth = 0
    for character in without_commands(text):
        depth += {"{": 1, "}": -1}.get(character, 0)
        assert depth >= 0
    assert depth == 0
    # the preformatted block's "\end{verbatim}" and "\section{x}" from the document stay text
    assert "\\end{verbatim}" not in text and "\\section{x}" not in text


def test_every_special_character_from_the_document_is_escaped(fragment):
    document, _, text = fragment
    # file names and labels are read as names, never typeset
    plain = without_commands(re.sub(r"\\includegraphics\[[^]]*\]\{[^}]*\}|\\label\{[^}]*\}|\\begin\{tabular\}.*", "",
                                    text))
    # TeXbook ch. 7: these would start a comment, math, a parameter, a sub/superscript or a tie
    for special in "%$#^_~":
        assert special not in plain, special
    # OT1 prints these as other glyphs (fntguide): only their text commands may appear
    for glyph in '<>|"':
        assert glyph not in plain, glyph
    # & only separates columns: each table line holds one fewer than its columns
    ampersand_lines = [line for line in plain.splitlines() if "&" in line]
    tables = tables_of(document)
    assert len(ampersand_lines) == sum(len(table.rows) + 1 for table in tables)
    expected = [len(table.header) - 1 for table in tables for _ in range(len(table.rows) + 1)]
    assert [line.count("&") for line in ampersand_lines] == expected
    # no two hyphens or quotes in a row reach TeX's ligature table (-- is a dash, '' a quote)
    assert "--" not in plain and "''" not in plain.replace("``", "")


def test_tables_are_booktabs_with_wrapping_columns_that_share_the_line(fragment):
    document, _, text = fragment
    specs = re.findall(r"\\begin\{tabular\}\{(.*)\}\n\\toprule", text)
    tables = tables_of(document)
    assert len(specs) == len(tables)
    for spec, table in zip(specs, tables):
        widths = r"p\{\\dimexpr ([0-9.]+)\\linewidth-2\\tabcolsep\\relax\}"
        fractions = [float(value) for value in re.findall(widths, spec)]
        assert len(fractions) == len(table.header)
        # each column is its share of the line less its own padding: the table is \linewidth wide
        assert sum(fractions) == pytest.approx(1.0, abs=2e-3)
    assert text.count(r"\toprule") == text.count(r"\midrule") == text.count(r"\bottomrule") == len(tables)


def test_figures_point_at_files_beside_the_fragment(tmp_path):
    document = example_document(tmp_path / "drawn")
    path = write_latex(document, tmp_path / "out" / "appendix.tex")
    links = re.findall(r"\\includegraphics\[width=\\linewidth\]\{([^}]*)\}", path.read_text(encoding="utf-8"))
    # the curve has a PDF, the basin map only a PNG (graphicx reads both under pdflatex)
    assert links == ["figures/fitted_curve.pdf", "figures/basin_map.png"]
    assert all((path.parent / link).is_file() for link in links)


def test_a_verdict_word_outside_the_list_is_refused(tmp_path):
    table = Table(caption="c", header=("check", "verdict"), rows=(("a", "passed"),), status_column=1)
    document = Document(title="t", subtitle="s", sections=(Section(title="x", anchor="x", blocks=(table,)),))
    with pytest.raises(ValueError, match="passed"):
        write_latex(document, tmp_path / "appendix.tex")


#: A host document as plain as they come: default (OT1) fonts and the packages the fragment lists.
PLAIN_HOST = r"""\documentclass[a4paper]{article}
\usepackage{graphicx}
\usepackage{booktabs}
\usepackage{array}
\begin{document}
\input{appendix}
\end{document}
"""
#: The same with T1 fonts, where every ASCII character is a glyph of its own (under OT1, ``\_``
#: is a drawn rule and ``~ ^`` are accents), so the PDF's text can be compared character by character.
T1_HOST = PLAIN_HOST.replace(r"\usepackage{graphicx}",
                             "\\usepackage[T1]{fontenc}\n\\usepackage{lmodern}\n\\usepackage{graphicx}")
NO_TEX = shutil.which("pdflatex") is None or shutil.which("pdftotext") is None
NO_TEX_REASON = "pdflatex or pdftotext not installed (Debian: texlive-latex-recommended, poppler-utils)"


def compile_fragment(folder: Path, host: str) -> tuple[str, Path]:
    """Compile ``host`` around ``folder/appendix.tex``; returns pdflatex's log and the PDF."""
    (folder / "host.tex").write_text(host, encoding="utf-8")
    run = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "host.tex"],
                         cwd=folder, capture_output=True, text=True, timeout=240, check=False)
    log = (folder / "host.log").read_text(encoding="latin-1")
    assert run.returncode == 0, log[-3000:]
    return log, folder / "host.pdf"


def squeezed(text: str) -> str:
    return re.sub(r"\s+", "", text)


@pytest.mark.skipif(NO_TEX, reason=NO_TEX_REASON)
def test_the_fragment_compiles_in_a_plain_host_and_nothing_sticks_out(fragment):
    _, path, _ = fragment
    log, pdf = compile_fragment(path.parent, PLAIN_HOST)
    # TeX reports every line that sticks out past its box, table cells and long words included
    overfull = re.findall(r"Overfull \\hbox \(([0-9.]+)pt too wide\)", log)
    assert [float(points) for points in overfull if float(points) > 1.0] == [], overfull
    # pdfTeX writes both figures into the PDF (the PNG one through graphicx's PNG reader)
    assert "fitted_curve.pdf" in log and "basin_map.png" in log
    assert pdf.stat().st_size > 0


def has_latin_modern() -> bool:
    """Whether TeX finds the Latin Modern fonts (T1 glyphs for every ASCII character)."""
    return shutil.which("kpsewhich") is not None and bool(
        subprocess.run(["kpsewhich", "lmodern.sty"], capture_output=True, text=True, check=False).stdout)


@pytest.mark.skipif(NO_TEX or not has_latin_modern(),
                    reason=NO_TEX_REASON + " or the Latin Modern fonts (Debian: lmodern) missing")
def test_the_pdf_reads_back_every_hostile_string_as_written(fragment):
    _, path, _ = fragment
    _, pdf = compile_fragment(path.parent, T1_HOST)
    pdf_text = subprocess.run(["pdftotext", "-enc", "UTF-8", str(pdf), "-"], capture_output=True, text=True,
                              check=True).stdout
    # pdftotext (poppler) reading the typeset page back: the text is the document's text
    read_back = squeezed(pdf_text)
    # ("---" is left out: pdftotext reads T1's hyphens back as fewer; the page image shows three)
    for hostile in HOSTILE + (HOSTILE_TITLE, LONG_WORD, "1. not a list item"):
        assert squeezed(hostile) in read_back, hostile
    for symbol in SYMBOLS.split():  # pdftotext reads a superscript as the plain digit
        assert symbol.replace("²", "2") in read_back, symbol
