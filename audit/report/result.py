"""The result of ``run_audit``: every stage's result, the verdict, provenance, and how to write them."""
from __future__ import annotations

import functools
import html
import json
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..figures import bootstrap as bootstrap_figures
from ..figures import derivatives as derivative_figures
from ..figures import fit as fit_figure
from ..figures import identifiability as identifiability_figures
from ..figures import residuals as residual_figures
from ..figures import sweep as sweep_figures
from ..jsonable import jsonable
from .appendix import build_appendix
from .document import Document
from .html import write_html
from .latex import write_latex
from .markdown import write_markdown
from .verdict import Verdict

AUDIT_FILE = "audit.json"
FIGURES = "figures"
#: The appendix needs both: PNG for HTML and Markdown, PDF for the LaTeX fragment.
BOTH_FORMATS = ("png", "pdf")
#: Figure writers to draw from which worker processes pay: each stage's figures take 0.15-1.7 s of
#: CPU on a fast spell of a two-core machine (the sweep's most, the fit's least), and starting
#: workers that import matplotlib costs about a second. A fresh audit has six to draw, a rerun
#: after a changed setting usually one or two.
WORKERS_PAY_FROM = 3


@dataclass
class AuditResult:
    """Everything one audit found. A stage's result is None when it did not run (see ``skipped``).

    Attributes:
        scenario: the audited ``Scenario``; quick: whether the small designs were used.
        derivatives: ``DerivativeAudit``; sweep: ``SweepResult`` and sweep_payload its ``to_dict()``.
        best_fit: the ``KnownFit`` every later stage audits (None when no fit converged).
        start_runs: fits from the scenario's start per step factor (``report.start_runs``).
        bootstrap: ``BootstrapResult``; identifiability: ``Identifiability``.
        asymptotic: ``Estimates`` at the best fit; residuals: ``ResidualChecks`` there.
        statement: ``UncertaintyStatement`` (the GUM form) from the asymptotic estimates.
        skipped: stage -> why it did not run and what to do.
        verdict: the table of checks; provenance: versions, date, file digests, seeds, settings.
    """

    scenario: object
    quick: bool
    derivatives: object | None
    sweep: object | None
    sweep_payload: dict | None
    best_fit: object | None
    start_runs: object
    bootstrap: object | None
    identifiability: object | None
    asymptotic: object | None
    residuals: object | None
    statement: object | None
    skipped: dict[str, str]
    verdict: Verdict
    provenance: dict

    def to_dict(self) -> dict:
        """Every number of the audit, JSON-ready (NaN as null)."""
        scenario = self.scenario
        return jsonable({
            "scenario": {"title": scenario.title, "description": scenario.description, "path": scenario.path,
                         "observations": scenario.problem.n_obs, "predictors": list(scenario.x_names),
                         "response": scenario.y_name, "sigma": scenario.sigma_name,
                         "formula": scenario.problem.formula,
                         "parameters": [{"name": p.name, "start": p.start, "range": [p.lower, p.upper],
                                         "scale": p.axis} for p in scenario.parameters],
                         "warnings": list(scenario.warnings)},
            "verdict": self.verdict,
            "best_fit": self.best_fit,
            "start_runs": self.start_runs,
            "derivatives": self.derivatives,
            "sweep": self.sweep_payload,
            "bootstrap": self.bootstrap,
            "identifiability": self.identifiability,
            "asymptotic": self.asymptotic,
            "residuals": self.residuals,
            "uncertainty_statement": self.statement,
            "not_run": self.skipped,
            "provenance": self.provenance,
        })

    def write_figures(self, folder: Path, mapper: Callable = map) -> list[Path]:
        """Every figure of the stages that ran, PNG (HTML, Markdown) and PDF (LaTeX), into ``folder``;
        the paths written, stage by stage.

        Figures found drawn for the same result are kept (``figures.drawn_once``). When at least
        WORKERS_PAY_FROM writers have figures to draw, they go to ``mapper(function, items)``, e.g.
        over worker processes of this machine (``parallel.plan.local_mapper``); fewer are drawn here.
        """
        scenario, problem = self.scenario, self.scenario.problem
        writers = []
        for result, stage in ((self.derivatives, derivative_figures), (self.sweep, sweep_figures),
                              (self.bootstrap, bootstrap_figures), (self.identifiability, identifiability_figures)):
            if result is not None:
                writers.append(functools.partial(stage.write_figures, result, folder, BOTH_FORMATS))
        if self.residuals is not None:
            x = problem.x if problem.x.ndim == 1 else problem.x.T
            fitted = problem.predict(self.best_fit.params[None, :])[0]
            picture = residual_figures.residual_picture(self.residuals, x, fitted, scenario.x_names[0])
            writers.append(functools.partial(residual_figures.draw_picture, picture, folder, BOTH_FORMATS))
        if self.asymptotic is not None:
            picture = fit_figure.fit_picture(problem, self.asymptotic, scenario.x_names[0], scenario.y_name)
            writers.append(functools.partial(fit_figure.draw_picture, picture, folder, BOTH_FORMATS))
        kept = [writer.func.kept(*writer.args) for writer in writers]
        missing = [writer for writer, files in zip(writers, kept) if files is None]
        drawn = iter((mapper if len(missing) >= WORKERS_PAY_FROM else map)(_called, missing))
        return [path for files in kept for path in (next(drawn) if files is None else files)]

    def write(self, folder: str | Path, mapper: Callable = map) -> list[Path]:
        """Write ``folder/audit.json``, ``folder/figures/*.{png,pdf}`` and the appendix files
        (``mapper``: see ``write_figures``).

        Returns:
            The paths written.

        Raises:
            InputError: when the folder cannot be written.
        """
        folder = Path(folder)
        try:
            folder.mkdir(parents=True, exist_ok=True)
            figures = self.write_figures(folder / FIGURES, mapper)
            document = build_appendix(self, figures)
            audit_file = folder / AUDIT_FILE
            audit_file.write_text(json.dumps(self.to_dict(), indent=1, allow_nan=False) + "\n")
            return [audit_file, *figures, *write_appendix(document, folder)]
        except OSError as error:
            raise InputError(f"{folder}: cannot write the audit there: {error.strerror}") from None

    def _repr_html_(self) -> str:
        """The verdict table as HTML, for a Jupyter notebook (every string escaped)."""
        colours = {"pass": "#1b5e20", "warn": "#8a6d00", "fail": "#b71c1c", "not run": "#555555"}
        rows = "".join(
            f"<tr><td>{html.escape(line.check)}</td>"
            f"<td style='color:{colours[line.status]};font-weight:bold'>{html.escape(line.status)}</td>"
            f"<td>{'' if not np.isfinite(line.value) else html.escape(f'{line.value:.4g}')}</td>"
            f"<td>{html.escape(line.reason)}</td></tr>" for line in self.verdict.lines)
        return (f"<div><strong>{html.escape(self.scenario.title)}</strong>: "
                f"{html.escape(self.verdict.summary)}<table><thead><tr><th>check</th><th>status</th>"
                f"<th>number</th><th>reason</th></tr></thead><tbody>{rows}</tbody></table></div>")


def write_appendix(document: Document, folder: Path) -> list[Path]:
    """Render the appendix ``document`` into ``folder``: appendix.html (self-contained),
    appendix.md (figures linked under figures/) and appendix.tex (a fragment to \\input).

    Returns:
        The three paths written.
    """
    return [write_html(document, folder / "appendix.html"), write_markdown(document, folder / "appendix.md"),
            write_latex(document, folder / "appendix.tex")]


def _called(writer: Callable[[], list[Path]]) -> list[Path]:
    """Run one figure writer (a module-level function, so that worker processes can be sent it)."""
    return writer()
