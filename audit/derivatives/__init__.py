"""Hand-derived partial derivatives against high-accuracy numeric (and exact formula)
references: where they disagree, which mistake it looks like, and what it does to a fit."""
from .check import audit_derivatives

__all__ = ["audit_derivatives"]
