"""The ground floor: the batched Gauss-Newton / Levenberg-Marquardt solver every stage reuses,
the ``Problem`` it fits, outcome codes, asymptotic estimates and the traced single fit.
It imports no other subpackage."""
from .batch import BatchFit, fit_batch
from .outcomes import Outcome
from .problem import Problem

__all__ = ["BatchFit", "Outcome", "Problem", "fit_batch"]
