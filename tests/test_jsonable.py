"""Result objects to strict JSON: arrays become lists of plain numbers, non-finite floats null."""
from __future__ import annotations

import json

import numpy as np

from audit.jsonable import jsonable


def test_arrays_become_the_plain_lists_json_reads_back_with_non_finite_values_as_null():
    rng = np.random.default_rng(5)
    arrays = {
        "int8": rng.integers(-100, 100, (4, 5, 6)).astype(np.int8),
        "int64": rng.integers(-2**62, 2**62, 7),
        "bool": rng.random((3, 3)) > 0.5,
        "floats": rng.normal(size=(3, 4)) * 10.0 ** rng.integers(-300, 300, (3, 4)),
        "gaps": np.array([[1.5, np.nan], [np.inf, -np.inf]]),
    }
    converted = jsonable(arrays)
    # Reference: the json module in strict mode (allow_nan=False) and numpy's own tolist().
    text = json.dumps(converted, allow_nan=False)
    back = json.loads(text)
    for name in ("int8", "int64", "bool", "floats"):
        assert back[name] == arrays[name].tolist()
        plain = type(arrays[name].flat[0].item())                    # int, bool or float
        assert all(type(item) is plain for item in np.ravel(np.array(back[name], dtype=object)))
    assert back["gaps"] == [[1.5, None], [None, None]]
    assert jsonable(np.float32(np.nan)) is None and jsonable(np.int16(3)) == 3
