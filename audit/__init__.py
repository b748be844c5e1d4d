"""fitaudit: a robustness audit for nonlinear least-squares fits (import name ``audit``)."""
from .engine.batch import BatchFit, fit_batch
from .errors import InputError
from .engine.outcomes import Outcome
from .engine.problem import Problem

__version__ = "0.1.0"

__all__ = ["BatchFit", "InputError", "Outcome", "Problem", "fit_batch", "__version__"]
