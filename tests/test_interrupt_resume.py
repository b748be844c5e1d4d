"""Interrupt and resume, as a user does it: a real fitaudit process is stopped with Ctrl-C (SIGINT)
or killed outright (SIGKILL) once its first chunk of bootstrap refits is on disk; running again
into the same output folder reuses every finished chunk and ends with exactly the numbers of a
run that was never interrupted. A parent killed outright leaves no worker processes behind.

Reference: common practice (finished work survives an interruption, a result must not depend on
whether it was computed in one go or resumed from a cache, and a killed program's helper
processes end with it); processes are read from the operating system's /proc.
"""
from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scenario_files import DECAY_PARAMETERS, csv_text, scenario_toml
from test_determinism import numbers

from audit.inputs.scenario import load_scenario
from audit.report.run import run_audit
from audit.uncertainty.bootstrap import bootstrap_scenario

ROOT = Path(__file__).resolve().parents[1]
#: Refits per bootstrap chunk for this scenario (bootstrap.MAX_CHUNK; 20 observations are few).
CHUNK = 1000
TOML = scenario_toml(parameters={**DECAY_PARAMETERS, "amplitude": {"start": 4.0, "range": [0.1, 20.0]}},
                     sweep={"points": 64, "resolution": 5}, bootstrap={"samples": 3000, "seed": 1})
#: Calls with a bootstrap chunk's thousand runs wait SLOW_MODEL_SECONDS, so that the interrupted
#: process is still inside the bootstrap when it is stopped; the numbers never depend on it, and
#: the runs that resume and compare leave it unset (no wait).
MODEL = """
import os
import time

import numpy as np


def model(t, amplitude, rate):
    if len(amplitude) >= 500:
        time.sleep(float(os.environ.get("SLOW_MODEL_SECONDS", "0")))
    return amplitude * np.exp(-rate * t)
"""


@pytest.fixture
def scenario_folder(write_scenario, monkeypatch):
    monkeypatch.delenv("SLOW_MODEL_SECONDS", raising=False)
    t = np.linspace(0.0, 5.0, 20)
    signal_values = 5.0 * np.exp(-0.47 * t) + np.random.default_rng(7).normal(0.0, 0.1, t.size)
    return write_scenario(TOML, model=MODEL, data=csv_text("t,signal", t, signal_values, formats=(".4f", ".6f")))


def started_with_slow_model(arguments: list[str], stderr: int) -> subprocess.Popen:
    """Start ``fitaudit ARGUMENTS`` from this tree in a new process whose model waits
    SLOW_MODEL_SECONDS = 0.05 s per bootstrap-sized call; its output is dropped, ``stderr`` is
    where its errors go (``subprocess.PIPE`` to read them as text)."""
    environment = {**os.environ, "SLOW_MODEL_SECONDS": "0.05", "PYTHONPATH": str(ROOT)}
    return subprocess.Popen([sys.executable, "-m", "audit", *arguments], cwd=ROOT, env=environment,
                            stdout=subprocess.DEVNULL, stderr=stderr, text=True)


def stopped_after_first_chunk(command: list[str], out: Path, stop: signal.Signals) -> int:
    """Run ``fitaudit COMMAND -o OUT --jobs 1`` in a new process with a slow model, send it
    ``stop`` as soon as the first bootstrap chunk file exists, and return its exit status."""
    process = started_with_slow_model([*command, "-o", str(out), "--jobs", "1"], stderr=subprocess.PIPE)
    try:
        waited = 0.0
        while not list(out.glob("cache/bootstrap-*/bootstrap-000000.npz")):
            assert process.poll() is None, f"the command ended before its first chunk: {process.stderr.read()}"
            assert waited < 300, "no chunk file appeared"
            time.sleep(0.02)
            waited += 0.02
        process.send_signal(stop)
        return process.wait(timeout=120)
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()


def stored_chunks(out: Path) -> list[str]:
    return sorted(path.name for path in out.glob("cache/bootstrap-*/*.npz"))


def test_ctrl_c_during_the_bootstrap_keeps_finished_chunks_and_a_rerun_gives_the_same_numbers(scenario_folder,
                                                                                                  tmp_path):
    out = tmp_path / "out"
    assert stopped_after_first_chunk(["bootstrap", str(scenario_folder)], out, signal.SIGINT) == 130
    finished = stored_chunks(out)
    # Stopped inside the stage: three bootstrap chunks and one leave-one-out chunk in all.
    assert 1 <= len(finished) < 4 and "bootstrap-000000.npz" in finished
    assert not list(out.glob("cache/**/.*.partial"))              # Ctrl-C removes its half-written file
    scenario = load_scenario(scenario_folder)
    resumed = bootstrap_scenario(scenario, folder=out)
    assert resumed.chunks == {"total": 4, "reused": len(finished), "computed": 4 - len(finished)}
    fresh = bootstrap_scenario(scenario)
    assert fresh.chunks == {"total": 4, "reused": 0, "computed": 4} and fresh.cache is None
    assert numbers(resumed.to_dict()) == numbers(fresh.to_dict())
    assert resumed.samples == 3000 and len(resumed.replicates.fate) == 3000


def test_a_killed_audit_resumes_in_its_bootstrap_and_gives_the_same_numbers(scenario_folder, tmp_path):
    out = tmp_path / "out"
    assert stopped_after_first_chunk(["run", str(scenario_folder)], out, signal.SIGKILL) == -signal.SIGKILL
    finished = stored_chunks(out)
    assert 1 <= len(finished) < 4
    resumed = run_audit(scenario_folder, out=out)
    assert resumed.sweep.chunks["computed"] == 0                  # the sweep had finished before
    assert resumed.bootstrap.chunks == {"total": 4, "reused": len(finished), "computed": 4 - len(finished)}
    # A writer killed outright cannot remove its temporary file; the next writer does.
    assert not list(out.glob("cache/**/.*.partial"))
    fresh = run_audit(scenario_folder)
    assert numbers(resumed.to_dict()) == numbers(fresh.to_dict())


def test_a_damaged_bootstrap_chunk_is_computed_again_and_other_settings_reuse_nothing(scenario_folder, tmp_path):
    scenario = load_scenario(scenario_folder)
    first = bootstrap_scenario(scenario, folder=tmp_path)
    chunk = Path(first.cache) / "bootstrap-000001.npz"
    damaged = bytearray(chunk.read_bytes())
    damaged[len(damaged) // 2] ^= 0x10                              # one flipped bit
    chunk.write_bytes(bytes(damaged))
    truncated = Path(first.cache) / "jackknife-000000.npz"
    truncated.write_bytes(truncated.read_bytes()[:100])
    repaired = bootstrap_scenario(scenario, folder=tmp_path)
    assert repaired.chunks == {"total": 4, "reused": 2, "computed": 2}
    assert numbers(repaired.to_dict()) == numbers(first.to_dict())
    for other in (dict(samples=2000), dict(method="wild"), dict(step_factor=0.5)):
        changed = bootstrap_scenario(scenario, folder=tmp_path, **other)
        assert changed.chunks["reused"] == 0 and changed.cache != first.cache, other


def process_state(pid: int) -> str | None:
    """The state letter of process ``pid`` in /proc (R, S, Z, ...), or None once it is gone."""
    try:
        return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return None


def descendants(pid: int) -> dict[int, str]:
    """Every process started by ``pid`` or by those, with its command line."""
    parents = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                parents[int(entry.name)] = int((entry / "stat").read_text().rsplit(")", 1)[1].split()[1])
            except (OSError, IndexError, ValueError):
                continue
    found, pending = {}, [pid]
    while pending:
        parent = pending.pop()
        for child in (child for child, of in parents.items() if of == parent):
            try:
                found[child] = (Path(f"/proc/{child}") / "cmdline").read_text().replace("\0", " ")
            except OSError:
                continue
            pending.append(child)
    return found


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads processes from /proc (Linux)")
def test_the_workers_of_a_killed_sweep_end_on_their_own(scenario_folder, tmp_path):
    # Without a check of their own, joblib's workers ran on for at least 400 s after their
    # parent was killed with SIGKILL (tried by hand); they now notice within about a second.
    process = started_with_slow_model(["sweep", str(scenario_folder), "--starts", "100000", "--jobs", "2",
                                       "-o", str(tmp_path / "out")], stderr=subprocess.DEVNULL)
    helpers: dict[int, str] = {}
    try:
        waited, workers = 0.0, {}
        while len(workers) < 2:
            assert process.poll() is None and waited < 300, "no worker processes appeared"
            workers = {pid: line for pid, line in descendants(process.pid).items() if "loky" in line}
            time.sleep(0.1)
            waited += 0.1
        helpers = descendants(process.pid)
        process.kill()
        process.wait()
        # A process whose parent is gone is reaped by whoever adopts it; a zombie left by an
        # adopter that does not reap has ended all the same.
        waited = 0.0
        while any(process_state(pid) not in (None, "Z") for pid in helpers) and waited < 20:
            time.sleep(0.2)
            waited += 0.2
        running = {pid: line for pid, line in helpers.items() if process_state(pid) not in (None, "Z")}
        assert not running, running
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
        for pid in helpers:                     # whatever a failed check left running
            if process_state(pid) not in (None, "Z"):
                os.kill(pid, signal.SIGKILL)
