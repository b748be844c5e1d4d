"""Multistart fits over a design of starting guesses x step factors: outcome shares, distinct
solutions and their symmetries, basin maps, the safe starting region and the recommendation."""
from .run import SweepRequest, run_sweep

__all__ = ["SweepRequest", "run_sweep"]
