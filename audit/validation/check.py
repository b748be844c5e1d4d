"""The engine checked against a folder of NIST StRD nonlinear regression problems.

Every problem is fitted from Start 1 and Start 2 with every requested step factor in one
``fit_batch`` call, each run graded by ``strd_grade``; per start the best run (best verdict,
then most parameter digits, then fewest iterations) and the step factors that reached the same
verdict are kept. This is what ``fitaudit strd`` shows and what a lab files as its validation.
"""
from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..engine.batch import METHODS, fit_batch
from ..engine.outcomes import Outcome
from ..errors import InputError
from ..jsonable import jsonable
from .grade import THRESHOLDS, RunGrades, Verdict, grade_runs, lre_ssr_at_certified, reference_model, verdict_label
from .reference import ReferenceProblem, read_reference

DIFFICULTIES = ("Lower", "Average", "Higher")


@dataclass(frozen=True)
class StrdSettings:
    """How the reference problems are fitted.

    Defaults: Levenberg-Marquardt with step factor 1 (no damping beyond its own), relative
    change tolerance 1e-10 (converged parameters then carry about 10 digits, well past the 6
    required; 1e-14 lets rounding noise stall the hardest problems) and 1000 iterations (the
    slowest runs need a few hundred; a stalled run then costs about a second).
    """

    method: str = "lm"
    step_factors: tuple[float, ...] = (1.0,)
    tolerance: float = 1e-10
    max_iterations: int = 1000

    def __post_init__(self) -> None:
        if self.method not in METHODS:
            raise InputError(f"--solver {self.method}: must be one of {', '.join(METHODS)}")
        if not self.step_factors or not all(0 < factor <= 1 for factor in self.step_factors):
            raise InputError(f"--step-factors: every factor must lie in (0, 1], got {list(self.step_factors)}")
        if not self.tolerance > 0:
            raise InputError(f"--tolerance {self.tolerance}: must be positive")
        if self.max_iterations < 1:
            raise InputError(f"--max-iterations {self.max_iterations}: must be at least 1")


@dataclass
class ProblemCheck:
    """All runs on one reference problem.

    Attributes:
        name, difficulty: as published.
        names: parameter names (n).
        certified, certified_sd: (n,) certified parameters and standard deviations.
        certified_ssr: the certified residual sum of squares.
        formula, response: the model and the response as fitted (fitaudit formula syntax).
        step_factors: (F,).
        grades: ``RunGrades`` whose arrays have two leading axes (2, F): start, step factor.
        lre_ssr_at_certified: SSR LRE double precision reaches at the certified parameters.
        best: (2,) index of the best step factor per start.
        best_factors: per start, the factors whose verdict equals the best run's.
    """

    name: str
    difficulty: str
    names: tuple[str, ...]
    certified: np.ndarray
    certified_sd: np.ndarray
    certified_ssr: float
    formula: str
    response: str
    step_factors: np.ndarray
    grades: RunGrades
    lre_ssr_at_certified: float
    best: np.ndarray = field(init=False)
    best_factors: tuple[tuple[float, ...], ...] = field(init=False)

    def __post_init__(self) -> None:
        grades = self.grades
        self.best = np.array([int(np.lexsort((grades.iterations[start], -grades.lre_params[start],
                                              grades.verdict[start]))[0]) for start in range(2)])
        self.best_factors = tuple(
            tuple(float(factor) for factor in self.step_factors[grades.verdict[start] == grades.verdict[start, best]])
            for start, best in enumerate(self.best))

    @property
    def passed(self) -> np.ndarray:
        """(2,) True where the best run from Start 1 / Start 2 passed."""
        return self.grades.verdict[np.arange(2), self.best] == Verdict.PASS

    @property
    def precision_limited(self) -> bool:
        """True when some run's SSR needed the extended-precision check."""
        return bool(self.grades.precision_limited.any())

    def label(self, start: int, factor: int) -> str:
        """The verdict of one run as shown in tables."""
        return verdict_label(self.grades.verdict[start, factor], self.grades.outcome[start, factor])

    def to_dict(self) -> dict:
        starts = []
        for start in range(2):
            runs = [self._run(start, factor) for factor in range(len(self.step_factors))]
            starts.append({"start": start + 1, "passed": self.passed[start], "best": runs[int(self.best[start])],
                           "best_step_factors": self.best_factors[start], "runs": runs})
        return jsonable({
            "name": self.name, "difficulty": self.difficulty, "formula": self.formula, "response": self.response,
            "certified": {"params": dict(zip(self.names, self.certified)),
                          "std_errors": dict(zip(self.names, self.certified_sd)), "ssr": self.certified_ssr},
            "lre_ssr_at_certified": self.lre_ssr_at_certified, "starts": starts,
        })

    def _run(self, start: int, factor: int) -> dict:
        g, at = self.grades, (start, factor)
        # A run that did not converge agrees in no meaningful number of digits: its LREs are null
        # (the table shows a dash), not the 0 that the clipped formula gives.
        converged = g.outcome[at] == Outcome.CONVERGED

        def digits(lre: np.ndarray) -> float | None:
            return float(lre[at]) if converged else None

        extended = None
        if np.isfinite(g.extended_ssr[at]):
            extended = {"ssr": g.extended_ssr[at], "lre_ssr": digits(g.extended_lre_ssr),
                        "lre_sd": digits(g.extended_lre_sd), "largest_relative_shift": g.extended_shift[at]}
        return {
            "step_factor": self.step_factors[factor], "outcome": Outcome(int(g.outcome[at])).label,
            "verdict": self.label(start, factor), "iterations": g.iterations[at],
            "params": dict(zip(self.names, g.params[at])), "ssr": g.ssr[at],
            "std_errors": dict(zip(self.names, g.std_errors[at])), "lre_params": digits(g.lre_params),
            "lre_ssr": digits(g.lre_ssr), "lre_sd": digits(g.lre_sd), "ssr_digits_available": g.ssr_digits[at],
            "precision_limited": g.precision_limited[at], "extended_precision": extended,
        }


def check_problem(reference: ReferenceProblem, settings: StrdSettings = StrdSettings()) -> ProblemCheck:
    """Fit one reference problem from both starts with every step factor and grade the runs."""
    fitted = reference_model(reference)
    factors = np.asarray(settings.step_factors, dtype=float)
    count = len(factors)
    starts = np.repeat(reference.starts, count, axis=0)                      # (2F, n), start-major
    fit = fit_batch(fitted.problem, starts, np.tile(factors, 2), method=settings.method, tol=settings.tolerance,
                    max_iter=settings.max_iterations)
    grades = grade_runs(fitted, fit)
    shaped = RunGrades(**{item.name: getattr(grades, item.name).reshape(2, count, *getattr(grades, item.name).shape[1:])
                          for item in dataclasses.fields(RunGrades)})
    return ProblemCheck(
        name=reference.name, difficulty=reference.difficulty, names=reference.names,
        certified=reference.certified, certified_sd=reference.certified_sd, certified_ssr=reference.ssr,
        formula=fitted.formula.model, response=fitted.formula.response, step_factors=factors, grades=shaped,
        lre_ssr_at_certified=lre_ssr_at_certified(fitted),
    )


@dataclass
class StrdReport:
    """The check of a whole folder of reference files.

    Attributes:
        folder: where the files were read.
        settings: how they were fitted.
        checks: one ``ProblemCheck`` per file, ordered by difficulty then name.
        passed: (P, 2) whether each problem passed from Start 1 / Start 2.
    """

    folder: Path
    settings: StrdSettings
    checks: list[ProblemCheck]
    passed: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self.passed = np.array([check.passed for check in self.checks], dtype=bool).reshape(-1, 2)

    @property
    def precision_limited(self) -> list[str]:
        """Names of the problems where some run's SSR needed the extended-precision check."""
        return [check.name for check in self.checks if check.precision_limited]

    def counts(self) -> dict[str, int]:
        """Problems, and how many passed from each start."""
        return {"problems": len(self.checks), "passed_start1": int(self.passed[:, 0].sum()),
                "passed_start2": int(self.passed[:, 1].sum())}

    def to_dict(self) -> dict:
        return jsonable({
            "folder": self.folder, "method": self.settings.method, "step_factors": self.settings.step_factors,
            "tolerance": self.settings.tolerance, "max_iterations": self.settings.max_iterations,
            "thresholds": THRESHOLDS, "counts": self.counts(), "precision_limited": self.precision_limited,
            "problems": [check.to_dict() for check in self.checks],
        })


def reference_files(folder: Path | str) -> list[Path]:
    """The ``.dat`` files of ``folder``, sorted by name.

    Raises:
        InputError: when the folder does not exist or holds no ``.dat`` file.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder}: folder not found")
    files = sorted(folder.glob("*.dat"))
    if not files:
        raise InputError(f"{folder}: no .dat files (NIST StRD nonlinear regression files) in this folder")
    return files


def check_folder(folder: Path | str, settings: StrdSettings = StrdSettings(),
                 on_problem: Callable[[str], None] | None = None) -> StrdReport:
    """Check every reference file in ``folder``.

    Args:
        folder: a folder of StRD ``.dat`` files.
        settings: method, step factors, tolerance, iteration limit.
        on_problem: called with each problem's name once it is done (progress display).

    Raises:
        InputError: for a missing folder, no files, or a file that is not a StRD problem.
    """
    checks = []
    for path in reference_files(folder):
        checks.append(check_problem(read_reference(path), settings))
        if on_problem is not None:
            on_problem(checks[-1].name)
    rank = {name: index for index, name in enumerate(DIFFICULTIES)}
    checks.sort(key=lambda check: (rank.get(check.difficulty, len(rank)), check.name))
    return StrdReport(folder=Path(folder), settings=settings, checks=checks)
