"""The whole audit and its appendix: ``run.run_audit`` drives every stage and returns an
``AuditResult``; ``verdict`` judges the stage results against one table of thresholds;
``appendix`` turns them into one ``Document``, which writers render to HTML, Markdown and LaTeX
(with the audit's JSON beside them)."""
from .document import Document, Figure, Paragraph, Preformatted, Section, Table
from .html import write_html
from .latex import write_latex
from .markdown import write_markdown

__all__ = ["Document", "Figure", "Paragraph", "Preformatted", "Section", "Table",
           "write_html", "write_latex", "write_markdown"]
