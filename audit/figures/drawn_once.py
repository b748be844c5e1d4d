"""Figures drawn once per result: a rerun that finds the same result's figures reuses them.

Drawing dominates a cached rerun (every stage result comes back from its cache in well under a
second, the figures took seconds), so each stage's ``write_figures`` is wrapped by ``drawn_once``.
Next to the figures it keeps a small record: a digest of the result (its ``to_dict()`` as JSON),
of the formats asked for and of the figure code, with the files drawn. When the record matches
and every file is still there, nothing is drawn again.
"""
from __future__ import annotations

import functools
import hashlib
import json
from collections.abc import Callable
from pathlib import Path

#: The figure code: a change to any of these files redraws every figure.
_CODE = tuple(sorted(Path(__file__).parent.glob("*.py")))


def drawn_once(draw: Callable[..., list[Path]]) -> Callable[..., list[Path]]:
    """Wrap ``draw(result, folder, formats) -> paths`` so that an unchanged result is not redrawn."""
    stage = draw.__module__.rsplit(".", 1)[-1]

    @functools.wraps(draw)
    def write(result, folder: Path, formats: tuple[str, ...] = ("png",)) -> list[Path]:
        folder = Path(folder)
        record = folder / f".{stage}-drawn.json"
        digest = _digest(result, formats)
        try:
            kept = json.loads(record.read_text())
        except (OSError, ValueError):
            kept = {}
        drawn = kept.get("files") if kept.get("digest") == digest else None
        if drawn is not None and all((folder / name).is_file() for name in drawn):
            return [folder / name for name in drawn]
        paths = draw(result, folder, formats)
        folder.mkdir(parents=True, exist_ok=True)
        record.write_text(json.dumps({"digest": digest, "files": [Path(path).name for path in paths]}))
        return paths

    return write


def _digest(result, formats: tuple[str, ...]) -> str:
    hasher = hashlib.sha256(json.dumps(result.to_dict(), sort_keys=True).encode())
    hasher.update(repr(tuple(formats)).encode())
    for path in _CODE:
        hasher.update(path.read_bytes())
    return hasher.hexdigest()
