"""Finished chunks on disk, so that an interrupted or repeated sweep computes only what is missing.

A cache folder is named by a hash of everything that decides a chunk's content: the scenario's
fingerprint (its TOML, data and model files), the sweep's settings, the format below and the
source of the package's computing modules (``code_digest``), so that a changed engine never
reuses chunks an older one wrote. Each chunk is one ``.npz`` file of plain arrays (no pickles),
written to a temporary file in the same folder and moved into place with ``os.replace``, which
is atomic on one file system: a crash leaves either the whole chunk or none of it. A file that cannot be read back (a disk
full during an earlier write, a stray file) is treated as missing and recomputed.
"""
from __future__ import annotations

import functools
import hashlib
import json
import os
import tempfile
import zipfile
from pathlib import Path

import numpy as np

#: Raise when the layout of a chunk file changes: old caches are then ignored (changes to the
#: computation are caught by ``code_digest``).
CACHE_FORMAT = 3
#: Folders of the package that only present results; their code never changes a chunk.
PRESENTATION = ("cli", "figures", "report")
#: Hex digits of the settings hash in the folder name.
KEY_LENGTH = 20


@functools.cache
def code_digest() -> str:
    """Hash of the source of every module that computes or merges chunks: the package's own
    modules outside the presentation folders, each named by its path inside the package."""
    package = Path(__file__).resolve().parents[1]
    digest = hashlib.sha256()
    for path in sorted(package.rglob("*.py")):
        inside = path.relative_to(package)
        if inside.parts[0] not in PRESENTATION:
            digest.update(inside.as_posix().encode() + b"\0" + path.read_bytes())
    return digest.hexdigest()


def cache_key(settings: dict) -> str:
    """A short hash of JSON-able ``settings`` (keys sorted, floats written exactly)."""
    text = json.dumps({"format": CACHE_FORMAT, **settings}, sort_keys=True, default=_exact)
    return hashlib.sha256(text.encode()).hexdigest()[:KEY_LENGTH]


def _exact(value):
    if isinstance(value, np.ndarray):
        return [float(item).hex() for item in value.ravel()] + [list(value.shape)]
    if isinstance(value, (np.floating, float)):
        return float(value).hex()
    if isinstance(value, np.integer):
        return int(value)
    raise TypeError(f"cannot hash {type(value).__name__}")


class ChunkStore:
    """The chunk files of one sweep stage in ``folder`` (created on first write).

    Files are named ``<stage>-<index>.npz``; ``stage`` tells design chunks from map chunks.
    """

    def __init__(self, folder: Path, stage: str) -> None:
        self.folder = Path(folder)
        self.stage = stage

    def path(self, index: int) -> Path:
        return self.folder / f"{self.stage}-{index:06d}.npz"

    def load(self, index: int) -> dict[str, np.ndarray] | None:
        """The arrays of chunk ``index``, or None when the chunk is not (readably) stored."""
        path = self.path(index)
        if not path.is_file():
            return None
        try:
            with np.load(path, allow_pickle=False) as stored:
                return {name: stored[name] for name in stored.files}
        except (OSError, ValueError, EOFError, zipfile.BadZipFile):
            return None

    def has(self, index: int) -> bool:
        """True when chunk ``index`` is stored and readable."""
        return self.load(index) is not None

    def save(self, index: int, arrays: dict[str, np.ndarray]) -> Path:
        """Write chunk ``index`` atomically and return its path."""
        self.folder.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=self.folder, prefix=f".{self.stage}-", suffix=".partial")
        try:
            with os.fdopen(handle, "wb") as stream:
                np.savez_compressed(stream, **arrays)
                stream.flush()
                os.fsync(stream.fileno())
            os.replace(temporary, self.path(index))
        except BaseException:
            Path(temporary).unlink(missing_ok=True)
            raise
        return self.path(index)
