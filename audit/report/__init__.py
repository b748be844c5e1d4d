"""The robustness appendix: the verdict with its reasons, and writers that render one document
to HTML, Markdown and LaTeX (with the audit's JSON beside them)."""
from .document import Document, Figure, Paragraph, Preformatted, Section, Table

__all__ = ["Document", "Figure", "Paragraph", "Preformatted", "Section", "Table"]
