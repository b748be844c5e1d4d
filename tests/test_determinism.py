"""The same scenario and seed give the same numbers whatever runs them, and two processes never
write one output folder at once.

Reference: common practice (a result must not depend on how the work was spread over processes,
nor on an earlier run's cache); the lock is checked from a real second process.
"""
from __future__ import annotations

import json
import subprocess
import sys
import textwrap
from pathlib import Path

from audit.cli import main

BUNDLED = str(Path(__file__).resolve().parents[1] / "scenarios" / "probe-cooling")
#: Keys that describe the run, not the audit: when, how it was called, what the cache held.
RUN_DESCRIPTION = {"provenance", "chunks", "cache", "command_line", "date", "elapsed_s"}


def numbers(payload):
    """The audit's JSON without the keys that describe the run itself."""
    if isinstance(payload, dict):
        return {key: numbers(value) for key, value in payload.items() if key not in RUN_DESCRIPTION}
    if isinstance(payload, list):
        return [numbers(value) for value in payload]
    return payload


def test_a_quick_audit_is_identical_for_one_and_two_jobs_and_on_a_cached_rerun(tmp_path):
    audits = []
    for folder, jobs in (("one", "1"), ("two", "2"), ("one", "2")):  # the last reruns from the cache
        assert main(["run", BUNDLED, "--quick", "--jobs", jobs, "-o", str(tmp_path / folder), "--json"]) == 0
        audits.append(numbers(json.loads((tmp_path / folder / "audit.json").read_text())))
    assert audits[0] == audits[1] == audits[2]


def test_a_second_process_cannot_write_a_busy_output_folder(tmp_path, capsys):
    out_folder = tmp_path / "out"
    holder = subprocess.Popen([sys.executable, "-c", textwrap.dedent(f"""
        import sys, time
        from audit.cli.common import claimed_output
        with claimed_output({str(out_folder)!r}):
            print("holding", flush=True)
            time.sleep(60)
        """)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "holding"
        status = main(["run", BUNDLED, "--quick", "-o", str(out_folder)])
        err = capsys.readouterr().err
        assert status == 2 and "another fitaudit run is writing to this folder" in err
        assert not (out_folder / "audit.json").exists()
    finally:
        holder.kill()
        holder.wait()
    # Once the other process is gone (killed outright), the system has dropped its lock.
    assert main(["derivatives", BUNDLED, "--check-points", "2", "-o", str(out_folder)]) == 0
    assert (out_folder / "derivatives.json").is_file()
