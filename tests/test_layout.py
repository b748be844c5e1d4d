"""The folders of ``audit/`` draw the architecture; these rules keep the imports saying the same.

Data flow (DEVELOPERS.md): files -> inputs (a Problem) -> engine <- stages -> result objects ->
figures / report -> cli. The engine is the ground floor; stages use the engine, the inputs and
the parallel map but never each other; figures only read result objects; only the command line
prints. Checked over the source with ``ast``: nothing is imported to check it.
"""
from __future__ import annotations

import ast
import sys
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "audit"
#: Modules at the package root that every layer may use.
SHARED = {"errors", "jsonable", "__version__"}
STAGES = {"sweep", "derivatives", "uncertainty", "identifiability", "validation", "residuals"}
#: Which subpackages each subpackage may import (besides itself and SHARED).
MAY_IMPORT = {
    "engine": set(),
    "parallel": set(),
    "inputs": {"engine"},
    **{stage: {"engine", "inputs", "parallel"} for stage in STAGES},
    "figures": STAGES | {"engine"},
    # The audit run drives every stage and chooses the default parallel plan.
    "report": STAGES | {"engine", "inputs", "figures", "parallel"},
}
#: The longest a module may grow before it is split by concept (house style).
MAX_LINES = 400


def modules() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def folder_of(path: Path) -> str:
    inside = path.relative_to(PACKAGE).parts
    return inside[0] if len(inside) > 1 else "(root)"


def imported_subpackages(path: Path) -> set[str]:
    """Top-level names inside ``audit`` that ``path`` imports (subpackages or root modules)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)[:-1]
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - (node.level - 1)]
                target = base + (node.module.split(".") if node.module else [])
                names = [target + [alias.name] for alias in node.names] if not node.module else [target]
            elif node.module and node.module.split(".")[0] == "audit":
                names = [node.module.split(".")]
            else:
                continue
        elif isinstance(node, ast.Import):
            names = [alias.name.split(".") for alias in node.names if alias.name.split(".")[0] == "audit"]
        else:
            continue
        for parts in names:
            if len(parts) > 1:
                found.add(parts[1])
    return found


@pytest.mark.parametrize("path", modules(), ids=lambda path: str(path.relative_to(PACKAGE)))
def test_imports_follow_the_data_flow(path):
    folder = folder_of(path)
    if folder in ("(root)", "cli"):
        return  # the package root re-exports the public API; the command line may use everything
    allowed = MAY_IMPORT[folder] | SHARED | {folder}
    wrong = imported_subpackages(path) - allowed
    assert not wrong, f"{path.relative_to(PACKAGE)} ({folder}) imports {sorted(wrong)}"


@pytest.mark.parametrize("path", modules(), ids=lambda path: str(path.relative_to(PACKAGE)))
def test_only_the_command_line_prints(path):
    if folder_of(path) == "cli" or path.name == "__main__.py":
        return
    tree = ast.parse(path.read_text(encoding="utf-8"))
    prints = [node.lineno for node in ast.walk(tree)
              if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id == "print"]
    consoles = [node.lineno for node in ast.walk(tree) if isinstance(node, (ast.Import, ast.ImportFrom))
                and any(name.startswith("rich") for name in
                        ([node.module or ""] if isinstance(node, ast.ImportFrom) else [a.name for a in node.names]))]
    assert not prints and not consoles, f"{path.relative_to(PACKAGE)} prints (lines {prints + consoles})"


def test_every_subpackage_states_its_job_and_exports_its_entry_points():
    for init in sorted(PACKAGE.glob("*/__init__.py")):
        tree = ast.parse(init.read_text(encoding="utf-8"))
        assert ast.get_docstring(tree), f"{init.parent.name}/__init__.py has no docstring"


@pytest.mark.parametrize("path", modules() + sorted((PACKAGE.parent / "tests").rglob("*.py")),
                         ids=lambda path: str(path.relative_to(PACKAGE.parent)))
def test_no_file_outgrows_the_house_limit(path):
    lines = len(path.read_text(encoding="utf-8").splitlines())
    assert lines <= MAX_LINES, f"{path.relative_to(PACKAGE.parent)} has {lines} lines; split it by concept"


def test_the_rules_catch_an_upward_import(tmp_path, monkeypatch):
    """A planted engine module importing a stage must be reported (the rule can fail)."""
    planted = tmp_path / "audit" / "engine" / "planted.py"
    planted.parent.mkdir(parents=True)
    planted.write_text("from ..sweep.run import run_sweep\nfrom ..errors import InputError\n")
    monkeypatch.setattr(sys.modules[__name__], "PACKAGE", tmp_path / "audit")
    assert imported_subpackages(planted) == {"sweep", "errors"}
    with pytest.raises(AssertionError, match="imports"):
        test_imports_follow_the_data_flow(planted)
