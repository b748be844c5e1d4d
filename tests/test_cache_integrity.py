"""The sweep's chunk cache never serves chunks of another model, and never trusts a damaged file."""
from __future__ import annotations

import numpy as np
import pytest
from scenario_files import data_columns, scenario_toml
from scipy.optimize import least_squares

from audit.inputs.scenario import load_scenario
from audit.parallel.chunk_cache import ChunkStore
from audit.parallel.plan import ParallelPlan
from audit.sweep import run as sweep_module
from audit.sweep.run import SweepRequest, run_sweep

# y = a·exp(-b·x) sampled at a = 2, b = 0.5 (rounded to 4 digits); only builds the problem.
DATA = "x,y\n0,2.0\n1,1.2131\n2,0.7358\n3,0.4463\n4,0.2707\n5,0.1642\n6,0.0996\n"
TOML = scenario_toml(data=data_columns("x", "y"),
                     parameters={"a": {"start": 1.0, "range": [0.5, 4.0]}, "b": {"start": 0.3, "range": [0.05, 2.0]}},
                     solver={"step_factors": [1.0, 0.5]}, sweep={"design": "grid", "points": 64, "resolution": 6})
MODEL = "from helper import curve\n\n\ndef model(x, a, b):\n    return curve(x, a, b)\n"
EXPONENTIAL = "import numpy as np\n\n\ndef curve(x, a, b):\n    return a * np.exp(-b * x)\n"
RATIONAL = "def curve(x, a, b):\n    return a / (1 + b * x)\n"


@pytest.fixture(autouse=True)
def small_chunks(monkeypatch):
    # 32 starts per chunk (two step factors): the 64-start design spans two chunks.
    monkeypatch.setattr(sweep_module, "CHUNK_RUNS", 64)


def reference_fit(curve, scenario) -> np.ndarray:
    """The least-squares fit by scipy.optimize.least_squares from the scenario's start."""
    x, y = scenario.problem.x, scenario.problem.y
    return least_squares(lambda p: curve(x, *p) - y, scenario.start, xtol=1e-14, ftol=1e-14, gtol=1e-14).x


def test_a_changed_helper_module_of_the_model_reuses_no_chunk(write_scenario, tmp_path):
    # The model imports helper.py from its folder; editing only the helper changes the model,
    # so a rerun into the same output folder must compute every chunk with the new model.
    folder = write_scenario(TOML, model=MODEL, data=DATA)
    (folder / "helper.py").write_text(EXPONENTIAL)
    first = run_sweep(load_scenario(folder), SweepRequest.from_scenario(load_scenario(folder)),
                      ParallelPlan(jobs=1), tmp_path / "out")
    (folder / "helper.py").write_text(RATIONAL)
    scenario = load_scenario(folder)
    second = run_sweep(scenario, SweepRequest.from_scenario(scenario), ParallelPlan(jobs=1), tmp_path / "out")
    assert second.chunks["reused"] == 0 and second.cache != first.cache
    # Reference: scipy.optimize.least_squares on a / (1 + b·x), the helper's new curve.
    expected = reference_fit(lambda x, a, b: a / (1 + b * x), scenario)
    np.testing.assert_allclose(second.best_params, expected, rtol=1e-6)
    # ... and the first sweep's best fit was the exponential's (same reference, old curve).
    np.testing.assert_allclose(first.best_params, reference_fit(lambda x, a, b: a * np.exp(-b * x), scenario),
                               rtol=1e-6)


@pytest.fixture
def swept(write_scenario, tmp_path):
    folder = write_scenario(TOML, model=MODEL, data=DATA)
    (folder / "helper.py").write_text(EXPONENTIAL)
    scenario = load_scenario(folder)
    request = SweepRequest.from_scenario(scenario)
    first = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path / "out")
    return scenario, request, first, tmp_path / "out"


def damage_flip_byte(path):
    data = bytearray(path.read_bytes())
    data[len(data) // 2] ^= 0x01
    path.write_bytes(bytes(data))


def damage_folder(path):
    path.unlink()
    path.mkdir()


def damage_swap(path):
    # Another chunk's (valid) file in this chunk's place.
    other = path.with_name(path.name.replace("000000", "000001"))
    path.write_bytes(other.read_bytes())


@pytest.mark.parametrize("damage", [damage_flip_byte, damage_folder, damage_swap], ids=["bit-flip", "folder", "swap"])
def test_a_damaged_chunk_is_recomputed_and_the_result_unchanged(swept, damage):
    scenario, request, first, out = swept
    damage(ChunkStore(first.cache, "design").path(0))
    repaired = run_sweep(scenario, request, ParallelPlan(jobs=1), out)
    assert repaired.chunks["computed"] == 1 and repaired.chunks["reused"] == first.chunks["total"] - 1
    # Reference: scipy.optimize.least_squares on the exponential curve.
    np.testing.assert_allclose(repaired.best_params, reference_fit(lambda x, a, b: a * np.exp(-b * x), scenario),
                               rtol=1e-6)
    np.testing.assert_array_equal(repaired.shares, first.shares)


def test_no_single_flipped_bit_in_a_chunk_file_is_trusted(tmp_path):
    # Every byte of a stored chunk flipped in turn: loading gives the stored arrays or None
    # (recompute), never other numbers and never an exception. Reference: the arrays saved.
    rng = np.random.default_rng(7)
    arrays = {"params": rng.normal(size=(40, 2)), "outcome": rng.integers(0, 6, 40).astype(np.int8),
              "span": np.array([0, 40])}
    store = ChunkStore(tmp_path, "design")
    pristine = store.save(0, arrays).read_bytes()
    trusted = 0
    for position in range(len(pristine)):
        damaged = bytearray(pristine)
        damaged[position] ^= 0x01
        store.path(0).write_bytes(bytes(damaged))
        loaded = store.load(0)
        if loaded is not None:
            trusted += 1
            assert loaded.keys() == arrays.keys()
            for name, array in arrays.items():
                np.testing.assert_array_equal(loaded[name], array)
    assert trusted < len(pristine) // 4
