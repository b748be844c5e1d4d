"""The one place that knows joblib and Dask: a parallel map over chunks whose results never
depend on the number of jobs or the backend, and the on-disk cache of finished chunks."""
from .plan import ParallelPlan

__all__ = ["ParallelPlan"]
