"""The appendix writers, read back by outside readers.

HTML: Python's own html.parser (tags balanced and nested, the text it reads equals the text the
document holds) and matplotlib's PNG reader for the embedded figures. Markdown: markdown-it-py,
the CommonMark parser rich depends on, with its pipe-table rule. LaTeX: a tokenizer that follows
TeX's reading rules (a backslash and the next character, or a backslash and letters, form one
command), and pdflatex with pdftotext where they are installed.
"""
from __future__ import annotations

import base64
import io
import re
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote

import matplotlib.image
import numpy as np
import pytest
from markdown_it import MarkdownIt
from report_examples import HOSTILE, HOSTILE_TITLE, LONG_WORD, example_document

from audit.report.column_widths import Measure, column_shares
from audit.report.document import Document, Figure, Section, Table
from audit.report.html import HTML_MEASURE, write_html
from audit.report.markdown import write_markdown

#: Elements that never have an end tag (HTML Living Standard, "void elements").
VOID_ELEMENTS = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


class TreeReader(HTMLParser):
    """Reads an HTML page into its text, its images, links and ids, and any nesting errors."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.open_tags: list[str] = []
        self.nesting_errors: list[str] = []
        self.start_tags: list[tuple[str, dict]] = []
        self.text_parts: list[str] = []
        self.status_cells: list[tuple[str, list[str]]] = []
        self.in_status_cell = False

    def handle_starttag(self, tag, attrs):
        attributes = dict(attrs)
        self.start_tags.append((tag, attributes))
        if tag not in VOID_ELEMENTS:
            self.open_tags.append(tag)
        if tag == "td" and "status" in (attributes.get("class") or "").split():
            self.status_cells.append((attributes["class"], []))
            self.in_status_cell = True

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)

    def handle_endtag(self, tag):
        if not self.open_tags or self.open_tags[-1] != tag:
            self.nesting_errors.append(f"</{tag}> closes {self.open_tags[-1:]}")
            return
        self.open_tags.pop()
        self.in_status_cell = self.in_status_cell and tag != "td"

    def handle_data(self, data):
        if "style" in self.open_tags:
            return
        self.text_parts.append(data)
        if self.in_status_cell:
            self.status_cells[-1][1].append(data)

    @property
    def text(self) -> str:
        return "".join(self.text_parts)

    def attribute_values(self, name: str) -> list[str]:
        return [attributes[name] for _, attributes in self.start_tags if name in attributes]


def read_html(text: str) -> TreeReader:
    reader = TreeReader()
    reader.feed(text)
    reader.close()
    return reader


@pytest.fixture
def example(tmp_path) -> tuple[Document, Path]:
    return example_document(tmp_path), tmp_path


def test_html_is_balanced_and_shows_every_hostile_string_as_text(example):
    document, folder = example
    page = write_html(document, folder / "appendix.html").read_text(encoding="utf-8")
    reader = read_html(page)
    # html.parser: every element closed in the order it was opened, nothing left open
    assert reader.nesting_errors == [] and reader.open_tags == []
    # no script element was created, from the document or otherwise
    assert "<script" not in page.lower()
    assert all(tag != "script" for tag, _ in reader.start_tags)
    # the text html.parser reads back is the document's text: escaping lost nothing
    for hostile in HOSTILE + (HOSTILE_TITLE, LONG_WORD):
        assert hostile in reader.text, hostile
    assert [tag for tag, _ in reader.start_tags].count("h1") == 1
    # control characters (a parse error in HTML) are replaced by a visible stand-in
    assert not re.search(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]", page)
    assert "and ? a bell" in reader.text


def test_html_embeds_every_figure_as_a_png_that_decodes_to_the_same_pixels(example):
    document, folder = example
    page = write_html(document, folder / "appendix.html").read_text(encoding="utf-8")
    reader = read_html(page)
    sources = [attributes["src"] for tag, attributes in reader.start_tags if tag == "img"]
    figures = [block for section in document.sections for block in section.blocks if isinstance(block, Figure)]
    assert len(sources) == len(figures) == 2
    for source, figure in zip(sources, figures):
        prefix = "data:image/png;base64,"
        assert source.startswith(prefix)
        embedded = matplotlib.image.imread(io.BytesIO(base64.b64decode(source[len(prefix):], validate=True)),
                                           format="png")
        # matplotlib's PNG reader: the embedded image has the pixels of the file on disk
        np.testing.assert_array_equal(embedded, matplotlib.image.imread(figure.png))


def test_html_needs_nothing_outside_the_file_and_links_only_inside_it(example):
    document, folder = example
    page = write_html(document, folder / "appendix.html").read_text(encoding="utf-8")
    reader = read_html(page)
    for source in reader.attribute_values("src"):
        assert source.startswith("data:")
    links = reader.attribute_values("href")
    assert links and all(link.startswith("#") for link in links)
    ids = reader.attribute_values("id")
    assert len(ids) == len(set(ids))
    # the contents list: one link per section, each to an element of the page
    assert len(links) == len(document.sections)
    assert {link[1:] for link in links} <= set(ids)
    style = page[page.index("<style>"):page.index("</style>")]
    assert "url(" not in style and "@import" not in style
    assert all(tag not in ("link", "script", "iframe", "object") for tag, _ in reader.start_tags)


def test_html_verdict_cells_carry_a_word_and_a_shape_not_colour_alone(example):
    document, folder = example
    page = write_html(document, folder / "appendix.html").read_text(encoding="utf-8")
    reader = read_html(page)
    cells = {"".join(parts).strip(): classes for classes, parts in reader.status_cells}
    assert len(cells) == 4
    words = ("pass", "warn", "fail", "not run")
    marks = set()
    for text, classes in cells.items():
        word = next(word for word in words if text.endswith(word))
        marks.add(text[: -len(word)].strip())
        assert f"status-{word.replace(' ', '-')}" in classes.split()
    # four words, four different marks beside them (WCAG 1.4.1: colour is not the only cue)
    assert len(marks) == 4 and "" not in marks
    # printed: rows and figures are kept whole and the table head repeats on each page
    media_print = page[page.index("@media print"):]
    assert re.search(r"(tr|figure)[^{]*\{[^}]*break-inside:\s*avoid", media_print)
    assert "table-header-group" in page


def commonmark(text: str) -> tuple[TreeReader, list]:
    parser = MarkdownIt("commonmark").enable("table")
    return read_html(parser.render(text)), parser.parse(text)


def test_markdown_read_by_commonmark_shows_every_hostile_string_and_numbered_headings(example):
    document, folder = example
    text = write_markdown(document, folder / "appendix.md").read_text(encoding="utf-8")
    rendered, tokens = commonmark(text)
    assert rendered.nesting_errors == []
    assert all(tag != "script" for tag, _ in rendered.start_tags)
    for hostile in HOSTILE + (HOSTILE_TITLE, LONG_WORD, "1. not a list item", "---"):
        assert hostile in rendered.text, hostile
    # a paragraph that looks like a list item or a rule stays a paragraph (only the contents list)
    tags = [tag for tag, _ in rendered.start_tags]
    assert tags.count("ol") == 1 and "hr" not in tags
    headings = [tokens[i + 1].content for i, token in enumerate(tokens)
                if token.type == "heading_open" and token.tag == "h2"]
    numbers = [heading.split(" ", 1)[0] for heading in headings]
    assert numbers == [f"{number}." for number in range(1, len(document.sections) + 1)]
    # pipe tables: as many tables as the document has, every row as wide as its header
    tables = [block for section in document.sections for block in section.blocks if isinstance(block, Table)]
    assert sum(tag == "table" for tag, _ in rendered.start_tags) == len(tables)
    rows = [token for token in tokens if token.type == "tr_open"]
    assert len(rows) == sum(len(table.rows) + 1 for table in tables)
    cells = sum(token.type in ("td_open", "th_open") for token in tokens)
    assert cells == sum((len(table.rows) + 1) * len(table.header) for table in tables)


def link_targets(tokens) -> list[str]:
    targets = []
    for token in tokens:
        for child in [token] + list(token.children or []):
            targets += [value for name, value in (child.attrs or {}).items() if name in ("src", "href")]
    return targets


def test_markdown_links_only_to_files_that_exist_inside_its_folder(tmp_path):
    document = example_document(tmp_path / "elsewhere")
    out = tmp_path / "out"
    text = write_markdown(document, out / "appendix.md").read_text(encoding="utf-8")
    rendered, tokens = commonmark(text)
    targets = link_targets(tokens)
    files = [unquote(target) for target in targets if not target.startswith("#")]
    assert len(files) == 2
    for name in files:
        linked = out / name
        assert name.startswith("figures/") and linked.is_file()
        # figures drawn outside the output folder were copied in, byte for byte
        assert linked.read_bytes() == (tmp_path / "elsewhere" / name).read_bytes()
    anchors = set(rendered.attribute_values("id"))
    assert all(target[1:] in anchors for target in targets if target.startswith("#"))


def test_markdown_without_a_subtitle_shows_no_stray_emphasis_marks(tmp_path):
    document = Document(title="t", subtitle=" ", sections=(Section(title="x", anchor="x", blocks=()),))
    rendered, _ = commonmark(write_markdown(document, tmp_path / "appendix.md").read_text(encoding="utf-8"))
    # CommonMark shows an empty emphasis "**" as two literal asterisks
    assert "*" not in rendered.text


def test_writers_refuse_a_verdict_word_they_do_not_know(tmp_path):
    table = Table(caption="c", header=("check", "verdict"), rows=(("a", "maybe"),), status_column=1)
    document = Document(title="t", subtitle="s", sections=(Section(title="x", anchor="x", blocks=(table,)),))
    for write in (write_html, write_markdown):
        with pytest.raises(ValueError, match="maybe"):
            write(document, tmp_path / "appendix")


def test_column_shares_follow_the_content_but_keep_the_longest_word_whole():
    """Hand derivation. Weights are the longest cells: 10 ("Lengthiest") and 39 (twenty "w"
    words), so by weight alone the first column gets 10/49 = 0.204 of the line. Its longest word
    needs (10 + 2 padding) / 50 = 0.24 of a 50-character line, so it is held at 0.24 and the
    second column gets the remaining 0.76 (more than its own need, (11 + 2) / 50 = 0.26)."""
    measure = Measure(line_characters=50, padding_characters=2, bold_width=1.0, break_longer_than=16, break_every=8)
    table = Table(caption="c", header=("Name", "Description"), rows=(("Lengthiest", " ".join(["w"] * 20)),))
    assert column_shares(table, measure) == pytest.approx([0.24, 0.76])
    # on a 20-character line the minima alone, 12/20 + 13/20 = 1.25, exceed it: both shrink by
    # the same factor, to 12/25 and 13/25
    narrow = Measure(line_characters=20, padding_characters=2, bold_width=1.0, break_longer_than=16, break_every=8)
    assert column_shares(table, narrow) == pytest.approx([12 / 25, 13 / 25])


def test_html_columns_get_the_shares_of_the_line(example):
    document, folder = example
    reader = read_html(write_html(document, folder / "appendix.html").read_text(encoding="utf-8"))
    widths = [float(attributes["style"].removeprefix("width: ").removesuffix("%"))
              for tag, attributes in reader.start_tags if tag == "col"]
    tables = [block for section in document.sections for block in section.blocks if isinstance(block, Table)]
    expected = [100 * share for table in tables for share in column_shares(table, HTML_MEASURE)]
    assert widths == pytest.approx(expected, abs=0.0051)  # written with two decimals
    assert sum(widths) == pytest.approx(100 * len(tables), abs=0.05)
