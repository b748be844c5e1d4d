"""Half-written chunk files (``.partial``) of writers that died are removed; a live writer's stay.

A process killed with SIGKILL cannot remove its temporary file. Outside reference: the
operating system's process table, asked with ``os.kill(pid, 0)`` (common practice for stale
lock and temporary files): a process that has exited and been waited for no longer exists.
"""
from __future__ import annotations

import os
import subprocess
import sys

import numpy as np

from audit.parallel.chunk_cache import ChunkStore


def finished_pid() -> int:
    """The id of a process that has ended (and been reaped)."""
    child = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True,
                           check=True)
    return int(child.stdout)


def test_leftovers_of_dead_writers_are_removed_and_a_live_writers_kept(tmp_path):
    dead = tmp_path / f".design-{finished_pid()}-x1y2.partial"
    live = tmp_path / f".design-{os.getpid()}-a3b4.partial"
    unrelated = tmp_path / "notes.partial.txt"
    for path in (dead, live, unrelated):
        path.write_bytes(b"half a chunk")
    store = ChunkStore(tmp_path, "design")
    store.save(0, {"values": np.arange(3.0)})
    assert not dead.exists() and live.exists() and unrelated.exists()
    np.testing.assert_array_equal(store.load(0)["values"], [0.0, 1.0, 2.0])   # the chunk as written
    assert sorted(path.name for path in tmp_path.iterdir()) == sorted([live.name, unrelated.name,
                                                                        "design-000000.npz"])
