"""Can the data determine the parameters: weak directions of the Jacobian, collinearity
indices, and profile-likelihood intervals that may stay open."""
from .analysis import identify_scenario

__all__ = ["identify_scenario"]
