"""Figures drawn once per result: a rerun that finds the same result's figures reuses them.

Drawing dominates a cached rerun (every stage result comes back from its cache in well under a
second, the figures took seconds), so each stage's ``write_figures`` is wrapped by ``drawn_once``.
Next to the figures it keeps a small record: a digest of the result (every array's bytes and
every other field's value), of the formats asked for and of the figure code, with the files
drawn. When the record matches
and every file is still there, nothing is drawn again.
"""
from __future__ import annotations

import dataclasses
import functools
import hashlib
import json
from collections.abc import Callable
from pathlib import Path

import numpy as np

#: The figure code: a change to any of these files redraws every figure.
_CODE = tuple(sorted(Path(__file__).parent.glob("*.py")))


def drawn_once(*bookkeeping: str) -> Callable[[Callable[..., list[Path]]], Callable[..., list[Path]]]:
    """Wrap ``draw(result, folder, formats) -> paths`` so that an unchanged result is not redrawn.

    ``bookkeeping`` names the result's fields that no figure shows and that change from a run to
    its cached rerun (how many chunks were reused, where the cache is); they are not digested.

    The wrapped function gains ``kept(result, folder, formats)``: the files it would keep, or
    None when it would draw, so that a caller can tell the figures still to draw from the rest
    before sending any of them to worker processes.
    """
    def wrap(draw: Callable[..., list[Path]]) -> Callable[..., list[Path]]:
        @functools.wraps(draw)
        def write(result, folder: Path, formats: tuple[str, ...] = ("png",), **options) -> list[Path]:
            return _write(draw, bookkeeping, result, folder, formats, options)

        write.kept = functools.partial(_kept, draw, bookkeeping)
        return write

    return wrap


def _kept(draw, bookkeeping: tuple[str, ...], result, folder: Path, formats: tuple[str, ...] = ("png",),
          **options) -> list[Path] | None:
    """The files of ``result``'s figures recorded in ``folder`` when the record matches and they are
    all there, else None (``options`` say how to draw, not what: they are not digested)."""
    return _recorded(draw, Path(folder), _digest(result, formats, bookkeeping))


def _recorded(draw, folder: Path, digest: str) -> list[Path] | None:
    """The files recorded in ``folder`` for ``draw`` under ``digest``, if the record says so and
    they are all there; else None."""
    try:
        kept = json.loads(_record(draw, folder).read_text())
    except (OSError, ValueError):
        return None
    drawn = kept.get("files") if kept.get("digest") == digest else None
    if drawn is not None and all((folder / name).is_file() for name in drawn):
        return [folder / name for name in drawn]
    return None


def _write(draw, bookkeeping: tuple[str, ...], result, folder: Path, formats: tuple[str, ...],
           options: dict) -> list[Path]:
    """The files of ``result``'s figures in ``folder``: those recorded there, or drawn now."""
    folder = Path(folder)
    digest = _digest(result, formats, bookkeeping)
    kept = _recorded(draw, folder, digest)
    if kept is not None:
        return kept
    paths = draw(result, folder, formats, **options)
    folder.mkdir(parents=True, exist_ok=True)
    _record(draw, folder).write_text(json.dumps({"digest": digest, "files": [Path(path).name for path in paths]}))
    return paths


def _record(draw, folder: Path) -> Path:
    """The record of ``draw``'s figures in ``folder``, named after its module (its stage)."""
    return folder / f".{draw.__module__.rsplit('.', 1)[-1]}-drawn.json"


def _digest(result, formats: tuple[str, ...], bookkeeping: tuple[str, ...]) -> str:
    hasher = hashlib.sha256(repr(tuple(formats)).encode())
    for field in dataclasses.fields(result):
        if field.name not in bookkeeping:
            hasher.update(field.name.encode())
            _feed(hasher, getattr(result, field.name))
    for path in _CODE:
        hasher.update(path.read_bytes())
    return hasher.hexdigest()


def _feed(hasher, value) -> None:
    """Hash a result: arrays by their bytes (not through ``to_dict``, which costs seconds on a
    sweep's maps), dataclasses field by field, containers item by item, the rest by repr."""
    if isinstance(value, np.ndarray):
        hasher.update(f"{value.dtype}{value.shape}".encode())
        hasher.update(np.ascontiguousarray(value).tobytes() if value.dtype != object else repr(value.tolist()).encode())
    elif dataclasses.is_dataclass(value) and not isinstance(value, type):
        hasher.update(type(value).__name__.encode())
        for field in dataclasses.fields(value):
            hasher.update(field.name.encode())
            _feed(hasher, getattr(value, field.name))
    elif isinstance(value, (list, tuple)):
        hasher.update(f"{type(value).__name__}{len(value)}".encode())
        for item in value:
            _feed(hasher, item)
    elif isinstance(value, dict):
        hasher.update(f"dict{len(value)}".encode())
        for key in sorted(value, key=repr):
            hasher.update(repr(key).encode())
            _feed(hasher, value[key])
    else:
        hasher.update(repr(value).encode())
