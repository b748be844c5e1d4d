"""Turn result objects into plain JSON-ready values (lists, floats, None for NaN)."""
from __future__ import annotations

import dataclasses
import math
from enum import Enum
from pathlib import Path

import numpy as np


def jsonable(value):
    """Recursively convert numpy arrays and scalars, enums, paths and dataclasses.

    Non-finite floats become ``None`` so that the output is strict JSON.
    """
    if isinstance(value, dict):
        return {str(key): jsonable(item) for key, item in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(item) for item in value]
    if isinstance(value, np.ndarray):
        # Whole arrays of integers, booleans or finite floats are plain already once listed (a
        # basin map holds some 10⁵ numbers: one by one they took a third of a second).
        if value.dtype.kind in "biu" or (value.dtype.kind == "f" and np.isfinite(value).all()):
            return value.tolist()
        return jsonable(value.tolist())
    if isinstance(value, Enum):
        return value.name.lower()
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer, int)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        number = float(value)
        return number if math.isfinite(number) else None
    if isinstance(value, Path):
        return str(value)
    if dataclasses.is_dataclass(value) and hasattr(value, "to_dict"):
        return value.to_dict()
    return value
