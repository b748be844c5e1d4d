"""The files ``fitaudit run --quick`` writes: the HTML parses and its images decode, the Markdown
links only to files that exist, the LaTeX fragment's environments balance, the tables hold the
JSON's numbers, and a hostile title is escaped in every format.

Outside references: Python's html.parser and base64, matplotlib's PNG reader, and scipy's
least_squares for the estimates (the JSON side is pinned to scipy in test_run.py).
"""
from __future__ import annotations

import base64
import io
import json
import re
import shutil
from html.parser import HTMLParser
from pathlib import Path

import matplotlib.image
import pytest

from audit.cli import main

BUNDLED = Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling"
HOSTILE = "<script>alert(1)</script> & 50% of a_b \\ {x} #1"


class Collector(HTMLParser):
    """Start and end tags in order, every <img> source, and the page's text."""

    def __init__(self):
        super().__init__()
        self.stack, self.mismatched, self.images, self.text = [], [], [], []

    VOID = {"img", "meta", "br", "hr", "col", "link", "input", "source", "wbr"}

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.images.append(dict(attrs)["src"])
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if tag in self.VOID:
            return
        if not self.stack or self.stack.pop() != tag:
            self.mismatched.append(tag)

    def handle_data(self, data):
        self.text.append(data)


def quick_run(folder: Path, scenario: Path) -> Path:
    out = folder / "out"
    main(["run", str(scenario), "--quick", "-o", str(out), "--json"])
    return out


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("hostile")
    scenario = folder / "scenario"
    shutil.copytree(BUNDLED, scenario)
    toml = scenario / "scenario.toml"
    title = HOSTILE.replace("\\", "\\\\")
    toml.write_text(re.sub(r'^title = ".*"$', lambda _: f'title = "{title}"', toml.read_text(), count=1, flags=re.M))
    return quick_run(folder, scenario)


def test_html_is_one_balanced_page_whose_images_decode(hostile_run):
    page = (hostile_run / "appendix.html").read_text(encoding="utf-8")
    parser = Collector()
    parser.feed(page)
    assert parser.mismatched == [] and parser.stack == []
    assert len(parser.images) >= 10
    for source in parser.images:
        assert source.startswith("data:image/png;base64,")
        pixels = matplotlib.image.imread(io.BytesIO(base64.b64decode(source.split(",", 1)[1])), format="png")
        assert pixels.ndim == 3 and pixels.shape[0] > 100
    # The hostile title is text on the page, never markup.
    assert "<script" not in page and HOSTILE in "".join(parser.text)


def test_markdown_links_only_to_files_that_exist(hostile_run):
    text = (hostile_run / "appendix.md").read_text(encoding="utf-8")
    targets = [target for target in re.findall(r"\]\(([^)#][^)]*)\)", text)]
    assert len(targets) >= 10
    for target in targets:
        assert (hostile_run / target).is_file(), target


def test_latex_fragment_balances_and_escapes_the_title(hostile_run):
    tex = (hostile_run / "appendix.tex").read_text(encoding="utf-8")
    begins = re.findall(r"\\begin\{(\w+\*?)\}", tex)
    ends = re.findall(r"\\end\{(\w+\*?)\}", tex)
    assert sorted(begins) == sorted(ends) and "figure" in begins and "tabular" in begins
    assert "\\documentclass" not in tex  # a fragment to \input
    for escaped in (r"\&", r"\%", r"a\_b", r"\#1", r"\{x\}", r"\textbackslash{}"):
        assert escaped in tex, escaped
    for figure in re.findall(r"\\includegraphics(?:\[[^]]*\])?\{([^}]+)\}", tex):
        assert (hostile_run / figure).is_file(), figure


def test_tables_hold_the_json_numbers(hostile_run):
    payload = json.loads((hostile_run / "audit.json").read_text())
    markdown = (hostile_run / "appendix.md").read_text(encoding="utf-8")
    estimates = markdown[markdown.index("Estimates with"):]
    for name, value in payload["best_fit"]["params"].items():
        escaped = name.replace('_', chr(92) + '_')
        row = next(line for line in estimates.splitlines() if line.startswith(f"| {escaped} |"))
        printed = float(row.split("|")[2])
        assert printed == pytest.approx(value, rel=1e-7), name
    for check in payload["verdict"]["checks"]:
        assert check["status"] in markdown
