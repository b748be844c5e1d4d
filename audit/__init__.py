"""fitaudit: a robustness audit for nonlinear least-squares fits (import name ``audit``)."""
from .engine import BatchFit, fit_batch
from .errors import InputError
from .outcomes import Outcome
from .problem import Problem

__version__ = "0.1.0"

__all__ = ["BatchFit", "InputError", "Outcome", "Problem", "fit_batch", "__version__"]
