"""What a reader needs to rerun an audit: versions, date, file digests, seeds, settings, command."""
from __future__ import annotations

import dataclasses
import datetime
import hashlib
import platform
from pathlib import Path

import numpy as np
import scipy

from .. import __version__
from ..inputs.scenario import SCENARIO_FILE
from ..inputs.settings import SECTIONS


def sha256_of(path: Path) -> str:
    """Hex SHA-256 digest of a file's bytes."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def provenance(scenario, *, quick: bool, plan, command_line: list[str]) -> dict:
    """Versions, the date (UTC), SHA-256 of the scenario, data and model files, seeds, settings.

    Args:
        scenario: the audited ``Scenario``.
        quick: whether the small designs of ``run_audit(quick=True)`` were used.
        plan: the ``ParallelPlan`` (results do not depend on it; recorded for the wall time).
        command_line: the words of the command that ran the audit.
    """
    files = {"scenario": scenario.path / SCENARIO_FILE, "data": scenario.data_path, "model": scenario.model_path}
    settings = {section: dataclasses.asdict(getattr(scenario, section)) for section in SECTIONS}
    return {
        "fitaudit": __version__, "python": platform.python_version(), "numpy": np.__version__,
        "scipy": scipy.__version__,
        "date": datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds"),
        "files": {kind: {"path": str(path), "sha256": sha256_of(path)} for kind, path in files.items()
                  if path is not None and Path(path).is_file()},
        "seeds": {section: settings[section]["seed"] for section in SECTIONS if "seed" in settings[section]},
        "settings": settings, "quick": quick,
        "parallel": dataclasses.asdict(plan),
        "command_line": list(command_line),
    }
