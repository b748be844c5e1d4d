"""Cache and resume: stored chunks are reused, an interrupted sweep continues where it stopped."""
from __future__ import annotations

import json

import numpy as np
import pytest
import twin_optima as twin

from audit.inputs.scenario import load_scenario
from audit.parallel.chunk_cache import ChunkStore
from audit.parallel.plan import ParallelPlan
from audit.sweep import run as sweep_module
from audit.sweep.run import SweepRequest, run_sweep


class Interrupt(KeyboardInterrupt):
    """Stands in for Ctrl-C arriving after some chunks were stored."""


def comparable(result) -> str:
    payload = result.to_dict()
    payload.pop("chunks")
    payload.pop("cache")
    return json.dumps(payload, sort_keys=True)


@pytest.fixture
def setup(write_scenario):
    folder = write_scenario(twin.scenario_toml(design="lhs", points=6000, resolution=40), model=twin.MODEL,
                            data=twin.DATA)
    scenario = load_scenario(folder)
    return scenario, SweepRequest.from_scenario(scenario)


def test_interrupted_sweep_resumes_without_computing_a_chunk_twice(setup, tmp_path):
    scenario, request = setup
    computed: list[tuple[str, int]] = []

    def stop_after_five(stage: str, index: int, reused: bool) -> None:
        if not reused:
            computed.append((stage, index))
        if len(computed) == 5:
            raise Interrupt

    with pytest.raises(Interrupt):
        run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path / "out", on_chunk=stop_after_five)
    reused: list[tuple[str, int]] = []

    def record(stage: str, index: int, was_reused: bool) -> None:
        (reused if was_reused else computed).append((stage, index))

    resumed = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path / "out", on_chunk=record)
    assert len(reused) == 5 and reused == computed[:5]
    assert len(computed) == len(set(computed)) == resumed.chunks["total"]
    assert resumed.chunks == {"total": len(computed), "reused": 5, "computed": len(computed) - 5}
    fresh = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path / "fresh")
    assert comparable(resumed) == comparable(fresh)


def test_a_second_run_reuses_everything_and_other_settings_reuse_nothing(setup, tmp_path):
    scenario, request = setup
    first = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path)
    again = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path)
    assert again.chunks["computed"] == 0 and again.chunks["reused"] == first.chunks["total"]
    assert comparable(again) == comparable(first)
    other = SweepRequest.from_scenario(scenario, step_factors=(1.0, 0.5))
    changed = run_sweep(scenario, other, ParallelPlan(jobs=1), tmp_path)
    assert changed.chunks["reused"] == 0 and changed.cache != first.cache


def test_a_changed_engine_reuses_nothing(setup, tmp_path, monkeypatch):
    # Chunks written by other code (a newer engine, an outcome rule changed) must not be reused.
    scenario, request = setup
    first = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path)
    monkeypatch.setattr(sweep_module, "code_digest", lambda: "another version of the engine")
    changed = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path)
    assert changed.chunks["reused"] == 0 and changed.cache != first.cache


def test_an_unreadable_chunk_is_computed_again(setup, tmp_path):
    scenario, request = setup
    first = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path)
    store = ChunkStore(first.cache, "design")
    store.path(1).write_bytes(b"not a zip file")
    repaired = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path)
    assert repaired.chunks["computed"] == 1
    assert comparable(repaired) == comparable(first)


def test_chunks_are_plain_arrays_and_leave_no_partial_files(setup, tmp_path):
    scenario, request = setup
    result = run_sweep(scenario, request, ParallelPlan(jobs=1), tmp_path)
    files = sorted(p.name for p in ChunkStore(result.cache, "design").folder.iterdir())
    assert files and all(name.endswith(".npz") and not name.startswith(".") for name in files)
    with np.load(ChunkStore(result.cache, "design").path(0), allow_pickle=False) as stored:
        assert stored["outcome"].dtype == np.int8 and stored["span"].tolist() == [0, request.starts_per_chunk]
