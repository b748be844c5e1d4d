"""The scenarios that ship with fitaudit, and finding one by name.

An installed fitaudit carries them in ``audit/bundled`` (``pyproject.toml`` maps the project's
top-level ``scenarios/`` folder there); a source checkout reads ``scenarios/`` itself, so that
editing a bundled scenario needs no reinstall.
"""
from __future__ import annotations

import tomllib
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputError
from .settings import nearest

SCENARIO_FILE = "scenario.toml"
_PACKAGE = Path(__file__).resolve().parents[1]
#: Where the scenarios are, in order of preference: inside the installed package, then the checkout.
CANDIDATE_FOLDERS = (_PACKAGE / "bundled", _PACKAGE.parent / "scenarios")


@dataclass(frozen=True)
class BundledScenario:
    """One bundled scenario: its folder name (what users type), its folder and its title."""

    name: str
    path: Path
    title: str


def bundled_folder() -> Path | None:
    """The folder holding the bundled scenarios, or None when this copy of fitaudit has none."""
    return next((folder for folder in CANDIDATE_FOLDERS if folder.is_dir()), None)


def bundled_scenarios() -> list[BundledScenario]:
    """Every bundled scenario, sorted by name; the title is the scenario's ``title`` line."""
    folder = bundled_folder()
    if folder is None:
        return []
    found = []
    for toml_path in sorted(folder.glob(f"*/{SCENARIO_FILE}")):
        try:
            title = str(tomllib.loads(toml_path.read_text(encoding="utf-8")).get("title", ""))
        except (tomllib.TOMLDecodeError, UnicodeDecodeError, OSError):
            title = "(scenario.toml cannot be read)"
        found.append(BundledScenario(name=toml_path.parent.name, path=toml_path.parent, title=title))
    return found


def resolve_scenario(text: Path | str) -> Path:
    """The path a user means: an existing path as given, else the bundled scenario of that name.

    Only a bare name (no folder part, no ``.toml``) is looked up among the bundled scenarios; any
    other path that does not exist is returned as it is, for the caller to report.

    Raises:
        InputError: for a bare name that is neither an existing path nor a bundled scenario; the
            message lists the bundled names (and the nearest one).
    """
    path = Path(text)
    if path.exists() or len(path.parts) != 1 or path.suffix == ".toml":
        return path
    bundled = {scenario.name: scenario.path for scenario in bundled_scenarios()}
    if path.name in bundled:
        return bundled[path.name]
    names = sorted(bundled)
    available = (f"; bundled scenarios: {', '.join(names)}" if names
                 else "; this copy of fitaudit has no bundled scenarios")
    raise InputError(f"{text}: no such scenario folder or file, and no bundled scenario of that name"
                     f"{nearest(path.name, names)}{available}")
