"""Another copy of the ``audit`` package, imported beside this tree's under another name, so that
a benchmark can time both in one process (each runs its own code from the model call up)."""
from __future__ import annotations

import importlib
import importlib.util
import sys
from pathlib import Path

BASELINE_PACKAGE = "baseline_audit"


def baseline_module(folder: Path, module: str):
    """``audit.<module>`` of the package under ``folder``, imported as ``baseline_audit.<module>``."""
    init = folder / "audit" / "__init__.py"
    if not init.is_file():
        raise SystemExit(f"{folder} holds no audit package (expected {init})")
    if BASELINE_PACKAGE not in sys.modules:
        spec = importlib.util.spec_from_file_location(BASELINE_PACKAGE, init,
                                                      submodule_search_locations=[str(init.parent)])
        package = importlib.util.module_from_spec(spec)
        sys.modules[BASELINE_PACKAGE] = package
        spec.loader.exec_module(package)
    return importlib.import_module(f"{BASELINE_PACKAGE}.{module}")
