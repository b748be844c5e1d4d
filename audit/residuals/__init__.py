"""Residual checks of one fit: are the errors independent along x, normal, and of one spread,
and which bootstrap scheme (residual, wild or pairs) do the data therefore suit?

``check_residuals(residuals, fitted, x, n_params, ...) -> ResidualChecks`` works on plain arrays.
"""
from .checks import ResidualChecks, check_residuals

__all__ = ["ResidualChecks", "check_residuals"]
