"""Resampling (residual, wild, pairs bootstrap) refitted through the batched engine:
percentile and BCa intervals next to the asymptotic ones, and the share of refits that fail."""
from .bootstrap import bootstrap_scenario, run_bootstrap

__all__ = ["bootstrap_scenario", "run_bootstrap"]
