"""What the user gives: scenario.toml, the data file, the model module or formula, and the
settings, checked and turned into a ``Problem`` for the engine."""
from .scenario import Scenario, load_scenario

__all__ = ["Scenario", "load_scenario"]
