"""The robustness appendix: the verdict with its reasons, and writers that render one document
to HTML, Markdown and LaTeX (with the audit's JSON beside them)."""
from .document import Document, Figure, Paragraph, Preformatted, Section, Table
from .html import write_html
from .latex import write_latex
from .markdown import write_markdown

__all__ = ["Document", "Figure", "Paragraph", "Preformatted", "Section", "Table",
           "write_html", "write_latex", "write_markdown"]
