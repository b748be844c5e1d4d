"""An appendix document for the writers' tests: every block kind, every tone, every verdict word,
and the strings that break a writer that forgets to escape (markup, TeX specials, Markdown
syntax, control characters, words too long for a line).

The figures are drawn from invented numbers: they only give the writers real PNG and PDF files
to embed or link; nothing is checked against them.
"""
from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402  (the backend must be chosen first)
import numpy as np  # noqa: E402

from audit.report.document import Document, Figure, Paragraph, Preformatted, Section, Table  # noqa: E402

#: A word with no place to break, longer than any page or table column is wide.
LONG_WORD = "Unbroken" + "x" * 150 + "End"
#: Strings a writer must show as written, each one in at least one place of every kind.
HOSTILE = (
    "<script>alert(1)</script>",
    "&",
    "%",
    "_",
    "\\",
    "$x$",
    "{",
    "}",
    "#",
    "|",
    "[link](x)",
    "`code`",
    "~^",
    "*stars* and __under__",
    "\"double\" 'single' two'' -- dash",
    "A&B 50% $5 #3 a_b {c} ~d ^e \\f <g> |h|",
)
HOSTILE_TITLE = "Fit <script>alert(1)</script> & 100% of $x$_1 {#} \\ | [link](x) `tick`"
#: Symbols the audit's own text uses; the LaTeX writer maps them to commands.
SYMBOLS = "1.5 ± 0.2 × 10 − 3 → 4 ≤ 5 ≥ 6 ≈ 7 µm 20 °C σ² α"


def draw_example_figure(folder: Path, name: str, pdf: bool = True) -> tuple[Path, Path | None]:
    """Write ``folder/name.png`` (and ``.pdf``): a curve through scattered points."""
    folder.mkdir(parents=True, exist_ok=True)
    x = np.linspace(0.0, 10.0, 40)
    y = 3.0 * np.exp(-0.4 * x) + 0.1 * np.sin(3.0 * x)
    figure, axes = plt.subplots(figsize=(6.0, 3.5), dpi=100)
    axes.plot(x, y, "o", color="#1b3a5c", label="measured")
    axes.plot(x, 3.0 * np.exp(-0.4 * x), "-", color="#b5651d", label="fitted")
    axes.set_xlabel("time (s)")
    axes.set_ylabel("signal")
    axes.legend()
    figure.tight_layout()
    png = folder / f"{name}.png"
    figure.savefig(png)
    pdf_path = folder / f"{name}.pdf" if pdf else None
    if pdf_path is not None:
        figure.savefig(pdf_path)
    plt.close(figure)
    return png, pdf_path


def example_document(folder: Path) -> Document:
    """The example appendix, its figures written under ``folder/figures/``."""
    figures = folder / "figures"
    curve_png, curve_pdf = draw_example_figure(figures, "fitted_curve")
    map_png, _ = draw_example_figure(figures, "basin_map", pdf=False)
    hostile_rows = tuple((f"row {i}", text, f"{i * 0.125:.3f}", text[::-1], text.upper(), str(len(text)))
                         for i, text in enumerate(HOSTILE))
    verdict = Table(
        caption="Verdict <b>bold?</b> & 5% of $runs$",
        header=("Check", "Verdict", "Reason", "Number"),
        rows=(
            ("Derivatives agree", "pass", "largest relative gap 3e-9", "3e-9"),
            ("Start reaches best fit", "warn", "2 of 3 step factors", "0.67"),
            ("Bootstrap failures", "fail", "40% of refits failed <script>", "0.40"),
            ("Profile intervals", "not run", LONG_WORD, "—"),
        ),
        status_column=1,
        notes=("A dash means the check could not run | see #5", "Thresholds: README & scenario.toml"),
    )
    wide = Table(
        caption="Hostile cells in six columns",
        header=("Name", "Text", "Value", "Reversed", "Upper case", "Length"),
        rows=hostile_rows + (("long", LONG_WORD, "1", LONG_WORD, LONG_WORD.upper(), str(len(LONG_WORD))),),
    )
    return Document(
        title=HOSTILE_TITLE,
        subtitle="Subtitle with % and _ and <em>tags</em> and \x07 a bell",
        sections=(
            Section(
                title="Scenario & data <i>",
                anchor="scenario data",
                blocks=(
                    Paragraph("Plain: " + " ".join(HOSTILE)),
                    Paragraph("Symbols: " + SYMBOLS),
                    Paragraph("Note with a\nnewline and # heading-like text", tone="note"),
                    Paragraph("Not for dosing & loads > 5%", tone="caution"),
                    Paragraph("1. not a list item"),
                    Paragraph("---"),
                    Paragraph(LONG_WORD),
                ),
            ),
            Section(
                title="Verdict_1 #2",
                anchor="verdict",
                blocks=(verdict, Figure(png=curve_png, caption="Fitted curve & 95% band, $y$_i", pdf=curve_pdf)),
            ),
            Section(
                title="Tables {and} figures",
                anchor="verdict",  # a repeated anchor: writers must still give unique targets
                blocks=(wide, Figure(png=map_png, caption="Basin map without a PDF [x](y)")),
            ),
            Section(
                title="Provenance \\ ~ ^",
                anchor="<prov>",
                blocks=(
                    Preformatted("fitaudit run scenarios/probe --quick -o out\n"
                                 "  indented line with ``` fences ```` and \\end{verbatim}"
                                 " and </pre><script>x</script>\n"
                                 "\n" + "path/" + "very_long_directory_name_" * 8 + "end.csv"),
                    Paragraph("Last words with 1 | 2 | 3 and \\section{x}", tone="note"),
                ),
            ),
        ),
    )
