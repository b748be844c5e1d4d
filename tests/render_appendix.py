"""Render an appendix page the way a reader sees it: a screenshot and a printed PDF, by headless Chromium.

Usage (from the project root)::

    python tests/render_appendix.py                    # the test example document -> render-out/
    python tests/render_appendix.py OUT/appendix.html -o shots/

Writes ``appendix.png`` (a 1200 x 3000 screenshot), ``appendix.pdf`` (Chromium's print to PDF,
with the page's print stylesheet) and, where poppler's ``pdftoppm`` is installed, one PNG per
printed page (``appendix-page-1.png``, ...). Look at them with an image viewer: tables cut
across pages, figures split, marks missing from verdict cells or text running off the page show
up there and nowhere else.

Needs Debian's ``chromium`` (``apt-get install -y chromium``) and, for the page images,
``poppler-utils``. Chromium runs without a sandbox, GPU, network services or a profile of its
own (a fresh temporary one), so it touches nothing outside the output folder; the page itself
loads nothing (the HTML writer forbids it).
"""
from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def chromium(page: Path, *arguments: str) -> None:
    """Run headless Chromium on ``page`` with a throw-away profile."""
    executable = shutil.which("chromium") or shutil.which("chromium-browser")
    if executable is None:
        sys.exit("chromium not found: apt-get update && apt-get install -y chromium")
    with tempfile.TemporaryDirectory() as profile:
        subprocess.run([executable, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", *arguments, page.resolve().as_uri()],
                       check=True, capture_output=True, timeout=180)


def render(page: Path, out: Path) -> list[Path]:
    """Screenshot and print ``page`` into ``out``; returns the image and PDF files written."""
    out.mkdir(parents=True, exist_ok=True)
    screenshot, printed = out / "appendix.png", out / "appendix.pdf"
    chromium(page, f"--screenshot={screenshot}", "--window-size=1200,3000")
    chromium(page, f"--print-to-pdf={printed}", "--no-pdf-header-footer")
    written = [screenshot, printed]
    for stale in out.glob("appendix-page-*.png"):
        stale.unlink()
    if shutil.which("pdftoppm"):
        subprocess.run(["pdftoppm", "-r", "60", "-png", str(printed), str(out / "appendix-page")], check=True)
        written += sorted(out.glob("appendix-page-*.png"))
    return written


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("page", nargs="?", type=Path, help="an appendix.html (default: the test example)")
    parser.add_argument("-o", "--out", type=Path, default=Path("render-out"), help="folder for the images")
    arguments = parser.parse_args()
    page = arguments.page
    if page is None:
        tests = Path(__file__).resolve().parent
        sys.path[:0] = [str(tests), str(tests.parent)]  # this checkout's audit, not an installed one
        from report_examples import example_document

        from audit.report.html import write_html

        page = write_html(example_document(arguments.out), arguments.out / "appendix.html")
    for path in render(page, arguments.out):
        print(path)


if __name__ == "__main__":
    main()
