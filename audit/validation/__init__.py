"""The engine against published certified results: the NIST StRD nonlinear regression
files, graded in log relative error (LRE)."""
from .check import check_folder

__all__ = ["check_folder"]
