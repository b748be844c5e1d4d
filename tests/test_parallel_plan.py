"""Workers are started only when the work pays for them; the results never depend on it."""
from __future__ import annotations

import os
import time

from audit.parallel.plan import WORKER_START_SECONDS, ParallelPlan, map_chunks


def square_with_pid(value: int) -> tuple[int, int]:
    return value * value, os.getpid()


def slow_square_with_pid(value: int) -> tuple[int, int]:
    time.sleep(WORKER_START_SECONDS / 2)
    return value * value, os.getpid()


def test_light_work_stays_in_this_process_and_heavy_work_goes_to_workers():
    # Reference: the squares by hand; os.getpid() tells where each chunk ran.
    light = list(map_chunks(square_with_pid, list(range(8)), ParallelPlan(jobs=2)))
    assert [value for value, _ in light] == [k * k for k in range(8)]
    assert {pid for _, pid in light} == {os.getpid()}
    # Eight chunks of half the start-up cost each: 3.5 start-ups' worth after the first, so workers.
    heavy = list(map_chunks(slow_square_with_pid, list(range(8)), ParallelPlan(jobs=2)))
    assert [value for value, _ in heavy] == [k * k for k in range(8)]
    assert {pid for _, pid in heavy} - {os.getpid()}
